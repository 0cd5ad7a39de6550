//! A real `tally import` killed with SIGKILL at several points, the commit
//! included: the store stays sound (`tally check`) and holds the whole batch
//! or nothing of it. SQLite's write-ahead log makes a transaction atomic
//! across a crash (https://www.sqlite.org/atomiccommit.html); this checks
//! that tally keeps every import inside one transaction.

use std::process::{Command, Stdio};
use std::time::Instant;

use crate::util::TestEnv;

/// A records file of `events` events with 20 counts each, at sites S01–S18
/// of the demo data, on dates the demo does not use (2030 onwards).
fn records(events: usize) -> String {
    let taxa = [
        "Baetis",
        "Ecdyonurus",
        "Rhithrogena",
        "Gammarus",
        "Asellus",
        "Chironomidae",
        "Elmis",
        "Leuctra",
        "Isoperla",
        "Hydropsyche",
        "Rhyacophila",
        "Sericostoma",
        "Glossosoma",
        "Limnius",
        "Nemoura",
        "Perla",
        "Physa",
        "Radix",
        "Pisidium",
        "Ancylus",
    ];
    let mut s = String::from("site,date,protocol,effort,taxon,count,replicate\n");
    for e in 0..events {
        let site = e % 18 + 1;
        let day = e / 18;
        let date = chrono_free_date(2030 + day / 300, day % 300);
        for (k, t) in taxa.iter().enumerate() {
            s.push_str(&format!(
                "S{site:02},{date},kick,3,{t},{},1\n",
                (e * 7 + k * 3) % 40 + 1
            ));
        }
    }
    s
}

/// Day `d` (0..300) of year `y` as a date that exists: months of 25 days.
fn chrono_free_date(y: usize, d: usize) -> String {
    format!("{y}-{:02}-{:02}", d / 25 + 1, d % 25 + 1)
}

/// The id of the newest import batch.
fn last_batch(env: &TestEnv) -> i64 {
    rusqlite::Connection::open(&env.db)
        .unwrap()
        .query_row("SELECT max(id) FROM import_batch", [], |r| r.get(0))
        .unwrap()
}

fn counts(env: &TestEnv) -> i64 {
    rusqlite::Connection::open(&env.db)
        .unwrap()
        .query_row("SELECT count(*) FROM count", [], |r| r.get(0))
        .unwrap()
}

#[test]
fn an_import_killed_at_any_point_leaves_all_or_nothing() {
    let env = TestEnv::with_demo_data();
    let file = env.write("big.csv", &records(6_000));
    let rows = 6_000 * 20;
    let before = counts(&env);
    // The batch a finished import of the file becomes.
    let batch = (last_batch(&env) + 1).to_string();
    let bin = env!("CARGO_BIN_EXE_tally");
    // How long a whole import takes here, to spread the kills over it.
    let full = {
        let probe = TestEnv::with_demo_data();
        let f = probe.write("big.csv", &records(6_000));
        let t = Instant::now();
        let status = Command::new(bin)
            .args(["--db", probe.db.to_str().unwrap(), "import", "records"])
            .arg(&f)
            .stderr(Stdio::null())
            .status()
            .unwrap();
        assert!(status.success());
        assert_eq!(counts(&probe), before + rows as i64);
        t.elapsed()
    };
    for fraction in [0.05, 0.2, 0.4, 0.6, 0.8, 0.9, 0.95, 0.98, 1.0, 1.02] {
        let mut child = Command::new(bin)
            .args(["--db", env.db.to_str().unwrap(), "import", "records"])
            .arg(&file)
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        std::thread::sleep(full.mul_f64(fraction));
        let _ = child.kill(); // SIGKILL on Unix
        let _ = child.wait();
        let (code, out, err) = env.run(["check"]);
        assert_eq!(
            code, 0,
            "after a kill at {fraction} of the import: {out}{err}"
        );
        let n = counts(&env);
        assert!(
            n == before || n == before + rows as i64,
            "after a kill at {fraction}: {n} counts, expected {before} or {}",
            before + rows as i64
        );
        if n != before {
            // It finished: undo it, so the next round starts from the same store.
            assert_eq!(last_batch(&env).to_string(), batch);
            let (code, _, err) = env.run(["batches", "undo", &batch]);
            assert_eq!(code, 0, "{err}");
            assert_eq!(counts(&env), before);
        }
    }
    // The last kill came after the import's usual end; the file still imports whole.
    env.stdout(["import", "records", file.to_str().unwrap()]);
    assert_eq!(counts(&env), before + rows as i64);
}
