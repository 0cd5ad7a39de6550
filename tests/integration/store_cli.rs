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
    // Imports refuse such names, so they are written directly, as a store made
    // by an older version or another program may hold them.
    let env = TestEnv::new();
    env.stdout(["init"]);
    rusqlite::Connection::open(&env.db)
        .unwrap()
        .execute_batch(
            "INSERT INTO taxon(name, rank) VALUES ('Bae' || char(27) || '[31mtis', 'genus'), \
             ('Cae' || char(8238) || 'nis', 'genus');",
        )
        .unwrap();
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

/// The lines of `tally check` (stdout) that start with `prefix`.
fn lines_with<'a>(out: &'a str, prefix: &str) -> Vec<&'a str> {
    out.lines().filter(|l| l.starts_with(prefix)).collect()
}

#[test]
fn check_names_what_is_missing_changed_or_extra_in_the_schema() {
    let env = TestEnv::new();
    env.stdout(["init"]);
    assert!(
        env.stdout(["check"])
            .contains("store is sound: schema ok, integrity ok"),
        "a fresh store"
    );
    rusqlite::Connection::open(&env.db)
        .unwrap()
        .execute_batch(
            "DROP TABLE saved_selection; DROP INDEX count_taxon; \
             DROP INDEX count_batch; CREATE INDEX count_batch ON count(value); \
             CREATE TABLE scratch(x);",
        )
        .unwrap();
    let want = [
        "schema: table saved_selection is missing",
        "schema: index count_taxon is missing",
        "schema: index count_batch differs from migration V1",
        "schema: table scratch is extra (no migration makes it)",
    ];
    let (code, out, err) = env.run(["check"]);
    assert_eq!(code, 1, "{out}{err}");
    assert_eq!(lines_with(&out, "schema: "), want, "{out}");
    assert!(err.contains("the store has 4 problems"), "{err}");
    // The quick check compares the schema too, and says it was quick.
    let (code, out, err) = env.run(["check", "--quick"]);
    assert_eq!(code, 1, "{out}{err}");
    assert_eq!(lines_with(&out, "schema: "), want, "{out}");
    assert!(
        err.contains("the quick check: the store has 4 problems"),
        "{err}"
    );
}

#[test]
fn check_names_a_dropped_table_and_what_it_could_not_check() {
    let env = TestEnv::new();
    env.stdout(["init"]);
    rusqlite::Connection::open(&env.db)
        .unwrap()
        .execute_batch("DROP TABLE count;")
        .unwrap();
    let (code, out, err) = env.run(["check"]);
    assert_eq!(code, 1, "{out}{err}");
    assert_eq!(
        lines_with(&out, "schema: "),
        [
            "schema: table count is missing",
            "schema: index count_batch is missing",
            "schema: index count_taxon is missing",
        ],
        "{out}"
    );
    assert!(
        out.contains("not checked: batches (no such table: count)"),
        "{out}"
    );
    assert!(err.contains("the store has 3 problems"), "{err}");
}

#[test]
fn check_quick_says_it_was_quick() {
    let env = TestEnv::with_demo_data();
    let out = env.stdout(["check", "--quick"]);
    assert_eq!(
        out.trim(),
        "quick check passed: schema ok, structure ok (quick_check), foreign keys ok; \
         not checked: index contents, taxonomy, batches (`tally check` without --quick checks them)"
    );
    let out = env.stdout(["check"]);
    assert_eq!(
        out.trim(),
        "store is sound: schema ok, integrity ok, foreign keys ok, taxonomy ok, batches ok"
    );
}

/// SQLite's message for a damaged file, as `tally check` and every command print it.
const DAMAGED: &str = "the store file is damaged (SQLite: database disk image is malformed); \
     restore the latest backup (`tally backup` makes one) — nothing in it can be trusted";

#[test]
fn a_corrupted_page_is_called_damage_with_what_to_do() {
    // One page in the middle of the demo store overwritten: a page of the
    // count table or of one of its indexes. Reading the table while opening
    // (the reference check) finds a damaged table page; a damaged index page
    // is found by the integrity check and listed.
    let env = TestEnv::with_demo_data();
    let mut bytes = std::fs::read(&env.db).unwrap();
    let page = 4096;
    assert!(
        bytes.len() >= 64 * page,
        "the demo store has {} bytes",
        bytes.len()
    );
    let middle = bytes.len() / 2 / page * page;
    bytes[middle..middle + page].fill(0xa5);
    std::fs::write(&env.db, &bytes).unwrap();
    let (code, out, err) = env.run(["check"]);
    assert_eq!(code, 1, "{out}{err}");
    if err.contains("opening store") {
        assert!(
            err.contains(DAMAGED) && err.trim().lines().count() == 1,
            "{err}"
        );
        // Every other command says the same.
        let (code, _, err) = env.run(["summary"]);
        assert_eq!(code, 1);
        assert!(err.contains(DAMAGED), "{err}");
    } else {
        assert!(!lines_with(&out, "integrity: ").is_empty(), "{out}");
        assert!(err.contains("the store has"), "{err}");
    }
}

#[test]
fn check_lists_the_first_integrity_problems_and_counts_the_rest() {
    // The root page of an index overwritten: the store opens (nothing reads
    // the index while opening), and the integrity check finds the damage.
    let env = TestEnv::with_demo_data();
    let root: i64 = rusqlite::Connection::open(&env.db)
        .unwrap()
        .query_row(
            "SELECT rootpage FROM sqlite_schema WHERE name = 'count_taxon'",
            [],
            |r| r.get(0),
        )
        .unwrap();
    let mut bytes = std::fs::read(&env.db).unwrap();
    let start = (root as usize - 1) * 4096 + 20;
    bytes[start..start + 3000].fill(0x07);
    std::fs::write(&env.db, &bytes).unwrap();
    let (code, out, err) = env.run(["check"]);
    assert_eq!(code, 1, "{out}{err}");
    let listed = lines_with(&out, "integrity: ");
    assert_eq!(listed.len(), 21, "{out}");
    assert!(
        listed[..20]
            .iter()
            .all(|l| l.contains(&format!("Tree {root} "))),
        "{out}"
    );
    assert!(listed[20].starts_with("integrity: … and "), "{out}");
    assert!(
        out.contains("not checked: taxonomy (the integrity check found problems)"),
        "{out}"
    );
    assert!(err.contains("the store has"), "{err}");
    // The quick check finds the damage too.
    let (code, out, _) = env.run(["check", "--quick"]);
    assert_eq!(code, 1);
    assert!(!lines_with(&out, "integrity: ").is_empty(), "{out}");
}

#[test]
fn a_truncated_store_is_named_truncated() {
    let env = TestEnv::with_demo_data();
    let bytes = std::fs::read(&env.db).unwrap();
    let half = bytes.len() / 2;
    std::fs::write(&env.db, &bytes[..half]).unwrap();
    let (code, _, err) = env.run(["check"]);
    assert_eq!(code, 1);
    // The page size at offset 16 of the header (https://www.sqlite.org/fileformat.html,
    // "The Database Header"); the demo store fills all its pages.
    let page = usize::from(u16::from_be_bytes([bytes[16], bytes[17]]));
    let pages = bytes.len() / page;
    assert!(
        err.contains(&format!(
            "is a truncated tally store: {half} bytes of {} expected \
             (page count {pages} × page size {page} in its header); restore from a backup",
            bytes.len()
        )) && err.trim().lines().count() == 1,
        "{err}"
    );
}

#[test]
fn files_that_are_not_stores_are_described_as_what_they_are() {
    let env = TestEnv::new();
    // Another program's SQLite database.
    let c = rusqlite::Connection::open(&env.db).unwrap();
    c.execute_batch("CREATE TABLE notes(x); CREATE TABLE birds(name);")
        .unwrap();
    drop(c);
    let (code, _, err) = env.run(["check"]);
    assert_eq!(code, 1);
    assert!(
        err.contains(
            "is not a tally store: an SQLite database of some other program \
             (application id 0x0, tables: birds, notes)"
        ),
        "{err}"
    );
    // An empty file.
    std::fs::write(&env.db, b"").unwrap();
    let (code, _, err) = env.run(["check"]);
    assert_eq!(code, 1);
    assert!(err.contains("is not a tally store: an empty file"), "{err}");
    // A text file, shown as its first bytes.
    std::fs::write(&env.db, "site,date\nS01,2016-04-21\nS02,2016-04-22\n").unwrap();
    let (code, _, err) = env.run(["check"]);
    assert_eq!(code, 1);
    assert!(
        err.contains(
            r#"is not a tally store: not an SQLite file (starts with "site,date\nS01,2016-04-21…")"#
        ),
        "{err}"
    );
    assert_eq!(err.trim().lines().count(), 1, "{err}");
}

#[test]
fn check_lists_broken_references() {
    // A reference broken outside tally (foreign keys off in another program):
    // the store still opens, and `check` names the table and row.
    let env = TestEnv::new();
    env.stdout(["init"]);
    rusqlite::Connection::open(&env.db)
        .unwrap()
        .execute_batch(
            "PRAGMA foreign_keys = OFF; \
             INSERT INTO site(code, import_batch_id) VALUES ('S1', 42);",
        )
        .unwrap();
    let (code, out, err) = env.run(["check"]);
    assert_eq!(code, 1, "{out}{err}");
    assert!(out.contains("foreign key"), "{out}");
}
