//! Matrix assembly benchmark: a generated store of 10,000,000 counts
//! (200 sites × 25 years × 20 events a year × 100 taxa), written with direct
//! inserts in one transaction; then the time to assemble a one-year selection, a
//! one-year site-year matrix and the whole store (target and last figures:
//! benches/README.md, "Matrix assembly"). `TALLY_BENCH_SITES` scales the store
//! down (default 200).
//!
//! Run: cargo bench --bench matrix
use std::time::Instant;

use tally::matrix::Unit;
use tally::matrix::assemble::assemble;
use tally::store::{Selection, Store};

const YEARS: i32 = 25;
const EVENTS_PER_YEAR: i32 = 20;
const TAXA: i64 = 100;

fn build(path: &std::path::Path, sites: i64) -> rusqlite::Result<()> {
    drop(Store::create(path).expect("create store"));
    let mut conn = rusqlite::Connection::open(path)?;
    conn.pragma_update(None, "synchronous", "OFF")?;
    let tx = conn.transaction()?;
    tx.execute(
        "INSERT INTO protocol(code, effort_unit) VALUES ('kick', 'minutes')",
        [],
    )?;
    for t in 1..=TAXA {
        tx.execute(
            "INSERT INTO taxon(id, name, rank) VALUES (?, ?, 'genus')",
            (t, format!("Taxon{t:03}")),
        )?;
    }
    {
        let mut site = tx.prepare("INSERT INTO site(id, code) VALUES (?, ?)")?;
        let mut attr =
            tx.prepare("INSERT INTO site_attribute(site_id, key, value) VALUES (?, 'reach', ?)")?;
        let mut event = tx.prepare(
            "INSERT INTO event(id, code, site_id, date, protocol_id, effort) VALUES (?, ?, ?, ?, 1, ?)",
        )?;
        let mut count =
            tx.prepare("INSERT INTO count(event_id, taxon_id, value) VALUES (?, ?, ?)")?;
        let mut id: i64 = 0;
        for s in 1..=sites {
            site.execute((s, format!("S{s:03}")))?;
            attr.execute((s, ["upper", "middle", "lower"][(s % 3) as usize]))?;
        }
        for y in 0..YEARS {
            for k in 0..EVENTS_PER_YEAR {
                for s in 1..=sites {
                    id += 1;
                    let date = format!("{}-{:02}-{:02}", 2000 + y, 1 + k % 12, 1 + k);
                    event.execute((id, format!("E{id}"), s, date, 2.0 + (id % 3) as f64))?;
                    for t in 1..=TAXA {
                        let v = ((id * 31 + t * 17) % 23) as f64;
                        count.execute((id, t, v))?;
                    }
                }
            }
        }
    }
    tx.commit()?;
    conn.execute_batch("ANALYZE; PRAGMA wal_checkpoint(TRUNCATE);")?;
    Ok(())
}

fn time(store: &Store, name: &str, sel: &Selection) {
    let mut secs = Vec::new();
    let mut shape = (0, 0);
    for _ in 0..5 {
        let t0 = Instant::now();
        let records = store.select_records(sel).expect("select");
        let m = assemble(&records, &sel.assembly_options()).expect("assemble");
        secs.push(t0.elapsed().as_secs_f64());
        shape = (m.values.nrows(), m.values.ncols());
    }
    secs.sort_by(f64::total_cmp);
    println!(
        "{name}: {} x {} matrix, median {:.3} s (min {:.3} s, max {:.3} s)",
        shape.0, shape.1, secs[2], secs[0], secs[4]
    );
}

fn main() {
    let sites: i64 = std::env::var("TALLY_BENCH_SITES")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(200);
    let dir = tempfile::tempdir().expect("temporary directory");
    let path = dir.path().join("bench.db");
    let t0 = Instant::now();
    build(&path, sites).expect("build store");
    let n = sites * i64::from(YEARS * EVENTS_PER_YEAR) * TAXA;
    println!(
        "built store of {n} counts in {:.1} s",
        t0.elapsed().as_secs_f64()
    );
    let store = Store::open(&path).expect("open store");
    let year = Selection {
        years: Some((2012, 2012)),
        ..Default::default()
    };
    time(&store, "one year, unit event", &year);
    let year_sy = Selection {
        unit: Some(Unit::SiteYear),
        per_effort: true,
        ..year.clone()
    };
    time(&store, "one year, unit site-year, per effort", &year_sy);
    let lower = Selection {
        site_where: vec![("reach".into(), "lower".into())],
        ..year
    };
    time(&store, "one year, one reach", &lower);
    time(&store, "whole store, unit event", &Selection::default());
}
