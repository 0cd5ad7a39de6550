//! `init` and store recognition, end to end.
use crate::util::TestEnv;

#[test]
fn init_creates_a_store_and_refuses_to_overwrite() {
    let env = TestEnv::new();
    env.cmd(["init"]).assert().success();
    assert!(env.db.exists());
    env.cmd(["init"]).assert().code(1);
}
