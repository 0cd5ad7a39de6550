//! Benchmark: one-way PERMANOVA, n = 2000 samples in 4 groups, 200 taxa of random
//! counts, Bray-Curtis, 9999 permutations. Target, reference and last figures:
//! benches/README.md, "PERMANOVA". Run with `cargo bench --bench permanova`; prints seconds.
//! The NumPy comparison is `benches/reference/permanova.py` (same sizes).
#[path = "cpu.rs"]
mod cpu;

use std::time::Instant;

use rand::rngs::ChaCha8Rng;
use rand::{RngExt, SeedableRng};
use rayon::prelude::*;
use tally::analysis::DistanceMatrix;
use tally::analysis::linear_model::{Grouping, SsType};
use tally::analysis::permanova::{PermanovaOptions, permanova_oneway};
use tally::analysis::permutation::Scheme;

fn main() {
    let (n, p, a, perms) = (2000usize, 200usize, 4usize, 9999usize);
    let mut rng = ChaCha8Rng::seed_from_u64(2024);
    // Sparse random counts: zero with probability 0.6, else uniform 1..=30.
    let y: Vec<Vec<f64>> = (0..n)
        .map(|_| {
            (0..p)
                .map(|_| {
                    if rng.random::<f64>() < 0.6 {
                        0.0
                    } else {
                        rng.random_range(1..=30) as f64
                    }
                })
                .collect()
        })
        .collect();
    let t0 = Instant::now();
    // Bray-Curtis by a plain loop, rows in parallel (the dissimilarity module has its own bench).
    let rows: Vec<Vec<f64>> = (0..n)
        .into_par_iter()
        .map(|i| {
            ((i + 1)..n)
                .map(|k| {
                    let (mut num, mut den) = (0.0, 0.0);
                    for (a, b) in y[i].iter().zip(&y[k]) {
                        num += (a - b).abs();
                        den += a + b;
                    }
                    num / den
                })
                .collect()
        })
        .collect();
    let d = DistanceMatrix::from_condensed(n, rows.concat()).expect("valid distances");
    let t_bc = t0.elapsed().as_secs_f64();
    let labels: Vec<usize> = (0..n).map(|i| i % a).collect();
    let g = Grouping::from_codes(&labels);
    let opts = PermanovaOptions {
        permutations: perms,
        seed: 1,
        scheme: Scheme::Free,
        ss_type: SsType::Sequential,
    };
    // Best of 3 wall-clock runs; CPU seconds of the process are printed too because the
    // machine may be shared (wall time then overstates the cost).
    let mut t_perm = f64::INFINITY;
    let mut cpu = 0.0;
    let mut r = None;
    for _ in 0..3 {
        let c0 = cpu::cpu_seconds();
        let t1 = Instant::now();
        r = Some(permanova_oneway(&d, &g, &opts, None).expect("permanova"));
        let t = t1.elapsed().as_secs_f64();
        if t < t_perm {
            t_perm = t;
            cpu = cpu::cpu_seconds() - c0;
        }
    }
    let r = r.expect("three runs");
    println!(
        "permanova one-way n={n} groups={a} taxa={p} permutations={perms} threads={}",
        rayon::current_num_threads()
    );
    println!("bray-curtis (plain loop): {t_bc:.3} s");
    println!(
        "permanova: {t_perm:.3} s wall, {cpu:.3} s cpu  (F = {:.6}, p = {:.4})",
        r.terms[0].pseudo_f, r.terms[0].p_value
    );
}
