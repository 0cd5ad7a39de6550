//! `init` and store recognition, end to end.
use crate::util::TestEnv;

#[test]
fn init_creates_a_store_and_refuses_to_overwrite() {
    let env = TestEnv::new();
    env.cmd(["init"]).assert().success();
    assert!(env.db.exists());
    env.cmd(["init"]).assert().code(1);
}

#[test]
fn demo_never_replaces_a_store_with_other_data() {
    // A real program's store named with --db: the demo refuses it and changes
    // nothing; --force replaces it.
    let env = TestEnv::new();
    env.cmd(["init"]).assert().success();
    let sites = env.write(
        "sites.csv",
        "code,name,latitude,longitude\nP01,Plot one,,\n",
    );
    env.cmd(["import", "sites", sites.to_str().unwrap()])
        .assert()
        .success();
    let before = env.dump();
    let o = env.cmd(["demo"]).output().unwrap();
    assert_eq!(o.status.code(), Some(1));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        err.contains("not replacing it") && err.contains("sites.csv"),
        "{err}"
    );
    assert_eq!(env.dump(), before, "the refused demo changed the store");
    env.cmd(["demo", "--force"]).assert().success();
    assert_ne!(env.dump(), before);
    // Its own store is replaced again without --force (the runs are made anew).
    env.cmd(["demo"]).assert().success();
}
