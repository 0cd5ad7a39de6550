//! Diversity benchmark: `tally diversity --coverage auto` (the workflow run on
//! a prepared matrix, without the store) on 100,000 rows × 200 taxa, and the
//! same with `--rarefy-to 50`. Target and last figures:
//! benches/README.md, "Diversity". Counts are generated from a fixed seed: geometric-series
//! relative abundances (ratio 0.97) drawn as Poisson-like counts around row
//! totals of 200–2000 individuals. `TALLY_BENCH_ROWS` changes the number of rows.
//!
//! Run: cargo bench --bench diversity
#[path = "cpu.rs"]
mod cpu;
use std::collections::BTreeMap;
use std::time::Instant;

use nalgebra::DMatrix;
use rand::rngs::ChaCha8Rng;
use rand::{RngExt, SeedableRng};
use tally::matrix::{CountMatrix, SampleMeta, TaxonMeta};
use tally::store::Selection;
use tally::workflow::diversity::Spec;
use tally::workflow::{Analysis, Prepared, Silent};

const TAXA: usize = 200;

fn matrix(rows: usize) -> CountMatrix {
    let mut rng = ChaCha8Rng::seed_from_u64(2026);
    let p: Vec<f64> = (0..TAXA).map(|j| 0.97_f64.powi(j as i32)).collect();
    let total: f64 = p.iter().sum();
    let mut values = DMatrix::zeros(rows, TAXA);
    for i in 0..rows {
        let n = 200.0 + 1800.0 * rng.random::<f64>();
        for j in 0..TAXA {
            let mu = n * p[j] / total;
            // A count near mu: floor(mu + u) keeps the mean and gives zeros for rare taxa.
            values[(i, j)] = (mu * (0.5 + rng.random::<f64>()) + rng.random::<f64>()).floor();
        }
    }
    let samples = (0..rows)
        .map(|i| SampleMeta {
            label: format!("S{:05}/{}", i / 20, 2000 + (i % 20) as i32),
            site: format!("S{:05}", i / 20),
            attributes: BTreeMap::new(),
            attribute_changes: Default::default(),
            year: 2000 + (i % 20) as i32,
            last_year: 2000 + (i % 20) as i32,
            season: None,
            first_date: "2000-06-01".into(),
            last_date: "2000-06-01".into(),
            events_pooled: 1,
            effort: 1.0,
            effort_unit: "minutes".into(),
            protocol: "kick".into(),
        })
        .collect();
    let taxa = (0..TAXA)
        .map(|j| TaxonMeta {
            name: format!("Taxon{j:03}"),
            rank: "genus".into(),
            unidentified: None,
        })
        .collect();
    CountMatrix {
        samples,
        taxa,
        values,
        notes: Vec::new(),
    }
}

fn main() {
    let rows: usize = std::env::var("TALLY_BENCH_ROWS")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(100_000);
    let t0 = Instant::now();
    let prepared = Prepared {
        selection: Selection::default(),
        matrix: matrix(rows),
        notes: Vec::new(),
    };
    println!(
        "diversity: {rows} rows x {TAXA} taxa generated in {:.2} s",
        t0.elapsed().as_secs_f64()
    );
    for (what, rarefy) in [
        ("--coverage auto", None),
        ("--coverage auto --rarefy-to 50", Some(50)),
    ] {
        let mut spec = Spec::new(0, 1);
        spec.rarefy_to = rarefy;
        let mut best = f64::INFINITY;
        let mut cpu = 0.0;
        let mut level = 0.0;
        for _ in 0..3 {
            let c0 = cpu::cpu_seconds();
            let t = Instant::now();
            let o = spec.run(&prepared, &Silent).expect("diversity");
            let s = t.elapsed().as_secs_f64();
            if s < best {
                best = s;
                cpu = cpu::cpu_seconds() - c0;
            }
            level = o.coverage.as_ref().map_or(0.0, |c| c.level);
        }
        println!(
            "diversity {what}: {best:.3} s wall, {cpu:.3} s cpu (common coverage {level:.4}, threads {})",
            rayon::current_num_threads()
        );
    }
}
