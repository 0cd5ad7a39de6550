//! Import benchmark: 1,000,000 field-sheet (records) rows into a fresh store file.
//!
//! The rows are generated with a fixed seed: 50 sites, 40 taxa, one protocol,
//! four visits a year for up to 30 years with 10 replicate samples per visit, and
//! about 20 of the 40 taxa found in each sample (about 50,000 events). Sites,
//! protocols and taxa are imported first; the timed part is the records file
//! alone, from bytes in memory to the committed transaction. Prints rows/s.
//! Target and last figures: benches/README.md, "Import".

use std::fmt::Write as _;
use std::time::Instant;

use rand::rngs::ChaCha8Rng;
use rand::{RngExt, SeedableRng};
use tally::store::Store;
use tally::store::import::{ImportKind, ImportOptions, import_bytes};

const SITES: usize = 50;
const TAXA: usize = 40;
const TARGET_ROWS: usize = 1_000_000;

/// CPU time of the calling thread in seconds (Linux `/proc/thread-self/schedstat`,
/// first field in nanoseconds), or `None` elsewhere. Reported beside wall time
/// because a shared machine's other load inflates the wall clock.
fn thread_cpu_seconds() -> Option<f64> {
    let text = std::fs::read_to_string("/proc/thread-self/schedstat").ok()?;
    let ns: f64 = text.split_whitespace().next()?.parse().ok()?;
    Some(ns / 1e9)
}

fn main() {
    let mut rng = ChaCha8Rng::seed_from_u64(20_160_421);
    let mut sites = String::from("code,name,latitude,longitude,reach\n");
    for s in 0..SITES {
        let reach = ["upper", "middle", "lower"][s % 3];
        writeln!(
            sites,
            "S{s:02},Site {s},{:.4},{:.4},{reach}",
            52.0 + s as f64 * 0.01,
            -3.0 - s as f64 * 0.01
        )
        .expect("invariant: writing to a String cannot fail");
    }
    let protocols = "code,description,effort_unit\nkick,kick sample,minutes\n";
    let mut taxa = String::from("name,rank,parent,accepted\n");
    for t in 0..TAXA {
        writeln!(taxa, "Taxon{t:02},genus,,").expect("invariant: writing to a String cannot fail");
    }
    // Abundance scale per taxon: a few common, many rare.
    let scale: Vec<f64> = (0..TAXA).map(|t| 200.0 / (1.0 + t as f64)).collect();
    let mut records = String::with_capacity(TARGET_ROWS * 40);
    records.push_str("site,date,protocol,effort,taxon,count,replicate\n");
    let mut rows = 0usize;
    'outer: for year in 1996..2026 {
        for (month, day) in [(3, 14), (5, 9), (8, 21), (10, 3)] {
            for s in 0..SITES {
                for rep in 1..=10 {
                    let effort = [2, 3, 3, 3, 4][rng.random_range(0..5)];
                    for (t, sc) in scale.iter().enumerate() {
                        if rng.random_range(0.0..1.0) < 0.5 {
                            continue;
                        }
                        let count = (rng.random_range(0.0..1.0) * sc).floor() as u32;
                        writeln!(
                            records,
                            "S{s:02},{year}-{month:02}-{day:02},kick,{effort},Taxon{t:02},{count},{rep}"
                        )
                        .expect("invariant: writing to a String cannot fail");
                        rows += 1;
                        if rows == TARGET_ROWS {
                            break 'outer;
                        }
                    }
                }
            }
        }
    }
    assert_eq!(
        rows, TARGET_ROWS,
        "the generator yields fewer rows than wanted"
    );

    let dir = tempfile::tempdir().expect("temporary directory");
    let mut store = Store::create(&dir.path().join("bench.db")).expect("create store");
    let opts = ImportOptions::default();
    for (kind, text) in [
        (ImportKind::Sites, sites.as_str()),
        (ImportKind::Protocols, protocols),
        (ImportKind::Taxa, &taxa),
    ] {
        import_bytes(&mut store, kind, kind.as_str(), text.as_bytes(), &opts)
            .expect("reference import");
    }
    let start = Instant::now();
    let cpu_start = thread_cpu_seconds();
    let report = import_bytes(
        &mut store,
        ImportKind::Records,
        "records.csv",
        records.as_bytes(),
        &opts,
    )
    .expect("records import");
    let secs = start.elapsed().as_secs_f64();
    let cpu = cpu_start.zip(thread_cpu_seconds()).map(|(a, b)| b - a);
    store.checkpoint().expect("checkpoint");
    let with_checkpoint = start.elapsed().as_secs_f64();
    println!(
        "import records: {} rows ({:.1} MB), {} events, {} counts in {secs:.3} s = {:.0} rows/s \
         ({:.0} rows/s including the WAL checkpoint)",
        report.rows,
        records.len() as f64 / 1e6,
        report.written,
        report.counts,
        report.rows as f64 / secs,
        report.rows as f64 / with_checkpoint
    );
    if let Some(cpu) = cpu {
        println!(
            "  CPU time of the importing thread: {cpu:.3} s = {:.0} rows per CPU-second",
            report.rows as f64 / cpu
        );
    }
}
