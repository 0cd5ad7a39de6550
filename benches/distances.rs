//! Dissimilarity benchmark: n = 5000 samples × 200 taxa of sparse random counts,
//! each coefficient timed best of 3, seconds printed. Compare with
//! `benches/reference/pdist.py` (SciPy `pdist`, same shape and sparsity). Target and
//! last figures: benches/README.md, "Dissimilarity matrix".
//!
//! Run: `cargo bench --bench distances` (release profile).
#[path = "cpu.rs"]
mod cpu;

use std::time::Instant;

use nalgebra::DMatrix;
use rand::{RngExt, SeedableRng, rngs::ChaCha8Rng};
use tally::analysis::Distance;

const N: usize = 5000;
const P: usize = 200;

fn main() {
    // Sparse counts: about 70 % zeros, the rest 1..=50; every row non-empty and
    // every column non-empty, so all coefficients are defined.
    let mut rng = ChaCha8Rng::seed_from_u64(5000200);
    let mut y = DMatrix::<f64>::from_fn(N, P, |_, _| {
        if rng.random_range(0.0..1.0) < 0.7 {
            0.0
        } else {
            rng.random_range(1..=50) as f64
        }
    });
    for i in 0..N {
        y[(i, i % P)] += 1.0;
    }
    println!(
        "dissimilarities: n = {N} samples x {P} taxa, {} pairs, {} threads",
        N * (N - 1) / 2,
        rayon::current_num_threads()
    );
    for dist in Distance::ALL {
        let mut best = f64::INFINITY;
        let mut best_cpu = f64::INFINITY;
        let mut check = 0.0;
        for _ in 0..3 {
            let c = cpu::cpu_seconds();
            let t = Instant::now();
            let d = dist
                .compute(&y)
                .expect("benchmark data are valid for every coefficient");
            best = best.min(t.elapsed().as_secs_f64());
            best_cpu = best_cpu.min(cpu::cpu_seconds() - c);
            check = d.condensed().iter().sum::<f64>();
        }
        println!(
            "{:<12} {:>8.3} s wall   {:>8.3} s cpu   (sum of entries {check:.6e})",
            dist.name(),
            best,
            best_cpu
        );
    }
}
