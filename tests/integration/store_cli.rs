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

#[test]
fn text_from_the_store_cannot_act_on_the_terminal() {
    // An escape sequence and a right-to-left override inside taxon names are shown
    // as code points in tables, notes and errors; JSON keeps the text as stored.
    let env = TestEnv::new();
    env.stdout(["init"]);
    env.import_all(&[(
        "taxa",
        "name,rank,parent,accepted\nBae\u{1b}[31mtis,genus,,\nCae\u{202e}nis,genus,,\n",
    )]);
    let table = env.stdout(["taxa", "list"]);
    assert!(
        !table.contains('\u{1b}') && !table.contains('\u{202e}'),
        "{table:?}"
    );
    assert!(
        table.contains("Bae<U+001B>[31mtis") && table.contains("Cae<U+202E>nis"),
        "{table}"
    );
    let (code, _, err) = env.run([
        "taxa",
        "rename",
        "Bae\u{1b}[31mtiss",
        "Baetis",
        "--reason",
        "typo",
    ]);
    assert_eq!(code, 1, "{err}");
    assert!(
        !err.contains('\u{1b}') && err.contains("<U+001B>"),
        "{err:?}"
    );
    let json = env.stdout(["taxa", "list", "--format", "json"]);
    let v: serde_json::Value = serde_json::from_str(&json).unwrap();
    assert!(v.to_string().contains("Bae\\u001b[31mtis"), "{v}");
}

#[test]
fn csv_cells_that_a_spreadsheet_would_run_are_neutralised() {
    // A name that begins like a formula gets a leading apostrophe in CSV;
    // numbers, negative ones included, do not; JSON keeps the name as stored.
    let env = TestEnv::new();
    env.stdout(["init"]);
    env.import_all(&[(
        "taxa",
        "name,rank,parent,accepted\n\"=HYPERLINK(\"\"x\"\")\",genus,,\n@Baetis,genus,,\n-Caenis,genus,,\n",
    )]);
    let csv = env.stdout(["taxa", "list", "--format", "csv"]);
    assert!(csv.contains("'=HYPERLINK"), "{csv}");
    assert!(
        csv.contains("'@Baetis") && csv.contains("'-Caenis"),
        "{csv}"
    );
    let json = env.stdout(["taxa", "list", "--format", "json"]);
    assert!(
        json.contains("\"@Baetis\"") && !json.contains("'@"),
        "{json}"
    );
}
