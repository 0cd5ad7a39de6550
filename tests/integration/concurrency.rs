//! Two writers at once: a command waits for another's write lock up to
//! `--busy-timeout`, then says what happened and changes nothing; an analysis
//! whose run cannot be stored still prints its result; `batches undo` reads
//! what depends on a batch inside its own write transaction.

use std::time::Duration;

use crate::util::TestEnv;

/// A second connection to the store holding the write lock (BEGIN IMMEDIATE)
/// until dropped or committed.
fn hold_lock(env: &TestEnv) -> rusqlite::Connection {
    let c = rusqlite::Connection::open(&env.db).unwrap();
    c.execute_batch("BEGIN IMMEDIATE").unwrap();
    c
}

const SITES: &str = "code,name,latitude,longitude\nX1,Extra site,,\n";

#[test]
fn a_writer_past_the_busy_timeout_says_so_and_changes_nothing() {
    let env = TestEnv::with_demo_data();
    let file = env.write("sites.csv", SITES);
    let before = env.dump();
    let lock = hold_lock(&env);
    let (code, _, err) = env.run([
        "--busy-timeout",
        "1",
        "import",
        "sites",
        file.to_str().unwrap(),
    ]);
    assert_eq!(code, 1, "{err}");
    assert!(
        err.contains("another program kept the store locked for more than 1 s"),
        "{err}"
    );
    assert!(err.contains("--busy-timeout"), "{err}");
    drop(lock);
    assert_eq!(env.dump(), before);
}

#[test]
fn a_writer_waits_for_a_short_lock() {
    let env = TestEnv::with_demo_data();
    let file = env.write("sites.csv", SITES);
    let lock = hold_lock(&env);
    let release = std::thread::spawn(move || {
        std::thread::sleep(Duration::from_millis(700));
        lock.execute_batch("COMMIT").unwrap();
    });
    let (code, _, err) = env.run(["import", "sites", file.to_str().unwrap()]);
    release.join().unwrap();
    assert_eq!(code, 0, "{err}");
    assert!(err.contains("1 row of sites"), "{err}");
}

#[test]
fn an_import_whose_checks_went_stale_runs_again_under_the_lock() {
    // Another writer adds a site and commits while the import has read the
    // store but not yet written: the import must not write on what it read
    // (SQLite refuses the stale snapshot), so it runs again holding the lock.
    let env = TestEnv::with_demo_data();
    let file = env.write("sites.csv", SITES);
    let lock = hold_lock(&env);
    lock.execute("INSERT INTO site(code) VALUES ('X2')", [])
        .unwrap();
    let release = std::thread::spawn(move || {
        std::thread::sleep(Duration::from_millis(700));
        lock.execute_batch("COMMIT").unwrap();
    });
    let (code, _, err) = env.run(["import", "sites", file.to_str().unwrap()]);
    release.join().unwrap();
    assert_eq!(code, 0, "{err}");
    let n: i64 = rusqlite::Connection::open(&env.db)
        .unwrap()
        .query_row(
            "SELECT count(*) FROM site WHERE code IN ('X1', 'X2')",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(n, 2);
}

#[test]
fn an_analysis_that_cannot_store_its_run_prints_it_anyway() {
    let env = TestEnv::with_demo_data();
    let args = [
        "permanova",
        "--protocol",
        "kick",
        "--unit",
        "site-year",
        "--per-effort",
        "--by",
        "reach",
        "--permutations",
        "99",
        "--seed",
        "7",
    ];
    let lock = hold_lock(&env);
    let (code, out, err) = env.run(["--busy-timeout", "1"].into_iter().chain(args));
    drop(lock);
    assert_eq!(code, 1, "{err}");
    assert!(out.contains("reach"), "the result is printed: {out}");
    assert!(!out.contains("run id"), "{out}");
    assert!(err.contains("NOT stored"), "{err}");
    assert!(
        err.contains("--seed 7"),
        "the command to store it again: {err}"
    );
    // Run again when the store is free: the same numbers, now stored.
    let again = env.stdout(args);
    let table = |s: &str| {
        s.lines()
            .filter(|l| !l.starts_with("run id"))
            .collect::<Vec<_>>()
            .join("\n")
    };
    assert_eq!(table(&again), table(&out));
    assert!(again.contains("run id"), "{again}");
}

#[test]
fn undo_reads_what_depends_on_a_batch_inside_its_transaction() {
    let env = TestEnv::with_demo_data();
    // A dependent count written by another connection but not yet
    // committed: the undo must wait for it, not act on what it read before.
    let other = hold_lock(&env);
    other
        .execute_batch(
            "INSERT INTO import_batch(kind, file, content_sha256, imported_at, rows) \
             VALUES ('counts', 'late.csv', printf('%064d', 9), '2026-01-01T00:00:00Z', 1); \
             INSERT INTO taxon(name, import_batch_id) VALUES ('Latecomer', last_insert_rowid()); \
             INSERT INTO count(event_id, taxon_id, value, import_batch_id) \
               SELECT (SELECT min(id) FROM event), (SELECT id FROM taxon WHERE name = 'Latecomer'), 1, \
                      (SELECT max(id) FROM import_batch);",
        )
        .unwrap();
    let release = std::thread::spawn(move || {
        std::thread::sleep(Duration::from_millis(700));
        other.execute_batch("COMMIT").unwrap();
    });
    // The undo starts while the dependent count is not yet committed; it
    // must see it once it holds the lock, and refuse naming its batch (read
    // before the lock, it would have found nothing to stop it).
    let (code, _, err) = env.run(["batches", "undo", "4"]);
    release.join().unwrap();
    assert_eq!(code, 1, "{err}");
    assert!(err.contains("batch 6 (late.csv) holds 1"), "{err}");
}

#[test]
fn readers_keep_reading_while_an_import_writes() {
    // Readers see the store before or after the import, never half of it:
    // every `summary` during the import succeeds and shows either count.
    let env = TestEnv::with_demo_data();
    let mut rows = String::from("site,date,protocol,effort,taxon,count\n");
    for d in 0..2_000 {
        for t in ["Baetis", "Gammarus", "Elmis", "Leuctra", "Asellus"] {
            rows.push_str(&format!(
                "S{:02},{}-{:02}-{:02},kick,3,{t},{}\n",
                d % 18 + 1,
                2040 + d / 300,
                d % 300 / 25 + 1,
                d % 25 + 1,
                d % 9 + 1
            ));
        }
    }
    let file = env.write("more.csv", &rows);
    let before = env.stdout(["summary"]);
    let first = |s: &str| s.lines().next().unwrap_or("").to_string();
    let bin = env!("CARGO_BIN_EXE_tally");
    let mut import = std::process::Command::new(bin)
        .args(["--db", env.db.to_str().unwrap(), "import", "records"])
        .arg(&file)
        .stderr(std::process::Stdio::null())
        .spawn()
        .unwrap();
    let mut seen = std::collections::BTreeSet::new();
    loop {
        let done = import.try_wait().unwrap().is_some();
        let (code, out, err) = env.run(["summary"]);
        assert_eq!(code, 0, "a reader failed during the import: {err}");
        seen.insert(first(&out));
        if done {
            break;
        }
    }
    assert!(import.wait().unwrap().success());
    let after = first(&env.stdout(["summary"]));
    assert!(
        seen.iter().all(|s| *s == first(&before) || *s == after),
        "{seen:?}"
    );
    assert_ne!(after, first(&before));
}
