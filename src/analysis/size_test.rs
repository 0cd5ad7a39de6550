//! The size test: one-way comparison of log sample totals between groups
//! (docs/methods.md, "The `compare` workflow", step (a)). Totals are given; effort
//! standardisation is the caller's job. The statistic is the one-way F on `ln t` with
//! a permutation p-value from the shared engine (PERMANOVA with Euclidean distance on
//! one variable is this F: Anderson 2001; docs/methods.md, "PERMANOVA"). The effect
//! size is the ratio of each group's geometric mean total to the reference group's,
//! with a seeded percentile-bootstrap interval that resamples samples within groups.
//!
//! Owns: [`size_test`], [`SizeTestOptions`], [`SizeTestResult`].

use serde::Serialize;

use super::AnalysisError;
use super::dispersion::{Permute, permuted_oneway};
use super::linear_model::Grouping;
use super::permutation::{PermutationOptions, Progress, Scheme, block_rng, bounded};

/// Generator stream used by the bootstrap (permutation blocks use streams 0, 1, …).
pub const BOOTSTRAP_STREAM: u64 = u64::MAX;

/// Options of the size test.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SizeTestOptions {
    /// Random permutations requested.
    pub permutations: usize,
    /// Seed of permutations and bootstrap.
    pub seed: u64,
    /// Exchangeability scheme.
    pub scheme: Scheme,
    /// Bootstrap resamples for the interval (0 = no interval).
    pub bootstrap: usize,
    /// Group code of the reference group.
    pub reference: usize,
    /// Interval coverage, e.g. 0.95.
    pub confidence: f64,
}

/// Size summary of one group.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SizeGroup {
    /// Level name.
    pub name: String,
    /// Samples.
    pub n: usize,
    /// Geometric mean total, `exp(mean ln t)`.
    pub geometric_mean: f64,
    /// Geometric mean relative to the reference group.
    pub ratio: f64,
    /// Lower percentile-bootstrap bound of the ratio (NaN when no bootstrap).
    pub ratio_low: f64,
    /// Upper bound.
    pub ratio_high: f64,
}

/// Result of the size test.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SizeTestResult {
    /// Per group.
    pub groups: Vec<SizeGroup>,
    /// Name of the reference group.
    pub reference: String,
    /// One-way F on ln(total).
    pub f: f64,
    /// Degrees of freedom (a - 1, n - a).
    pub df: (usize, usize),
    /// Permutation p-value.
    pub p_value: f64,
    /// Permutations evaluated.
    pub permutations: usize,
    /// Exactly enumerated.
    pub exact: bool,
    /// Smallest attainable p-value.
    pub min_p: f64,
    /// Seed.
    pub seed: u64,
    /// Scheme, described.
    pub scheme: String,
    /// Bootstrap resamples.
    pub bootstrap: usize,
    /// Interval coverage.
    pub confidence: f64,
}

/// Linear-interpolation quantile of sorted data (the default of NumPy's `quantile`).
fn quantile(sorted: &[f64], q: f64) -> f64 {
    let h = (sorted.len() - 1) as f64 * q;
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(sorted.len() - 1);
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

/// Compare log totals between groups.
///
/// # Errors
/// [`AnalysisError::DimensionMismatch`]; [`AnalysisError::NonFinite`] /
/// [`AnalysisError::Negative`] (row, column 0) for bad totals;
/// [`AnalysisError::EmptySamples`] for zero totals (their log is undefined);
/// [`AnalysisError::TooFewGroups`]; [`AnalysisError::Saturated`] (n ≤ groups);
/// [`AnalysisError::InvalidArgument`] for a bad reference or confidence.
pub fn size_test(
    totals: &[f64],
    groups: &Grouping,
    opts: &SizeTestOptions,
    progress: Option<Progress<'_>>,
) -> Result<SizeTestResult, AnalysisError> {
    let n = totals.len();
    if groups.n() != n {
        return Err(AnalysisError::DimensionMismatch {
            expected: n,
            found: groups.n(),
        });
    }
    if let Some(row) = totals.iter().position(|t| !t.is_finite()) {
        return Err(AnalysisError::NonFinite { row, col: 0 });
    }
    if let Some(row) = totals.iter().position(|&t| t < 0.0) {
        return Err(AnalysisError::Negative { row, col: 0 });
    }
    let empty: Vec<usize> = (0..n).filter(|&i| totals[i] == 0.0).collect();
    if !empty.is_empty() {
        return Err(AnalysisError::EmptySamples { rows: empty });
    }
    let a = groups.n_groups();
    if a < 2 {
        return Err(AnalysisError::TooFewGroups { found: a, min: 2 });
    }
    if n <= a {
        return Err(AnalysisError::Saturated { rank: a, n });
    }
    if opts.reference >= a {
        return Err(AnalysisError::InvalidArgument {
            name: "reference",
            reason: format!("group {} of {a}", opts.reference),
        });
    }
    if !(opts.confidence > 0.0 && opts.confidence < 1.0) {
        return Err(AnalysisError::InvalidArgument {
            name: "confidence",
            reason: "must be in (0, 1)".into(),
        });
    }
    let logs: Vec<f64> = totals.iter().map(|t| t.ln()).collect();
    let popts = PermutationOptions {
        permutations: opts.permutations,
        seed: opts.seed,
    };
    let res = permuted_oneway(
        &logs,
        groups,
        Permute::Values,
        &opts.scheme,
        &popts,
        progress,
    )?;

    let members: Vec<Vec<usize>> = (0..a).map(|g| groups.members(g)).collect();
    let mean_log = |idx: &[usize]| idx.iter().map(|&i| logs[i]).sum::<f64>() / idx.len() as f64;
    let means: Vec<f64> = members.iter().map(|m| mean_log(m)).collect();
    let r = opts.reference;
    // Percentile bootstrap of exp(mean_g - mean_ref), resampling within each group.
    let mut boots = vec![Vec::with_capacity(opts.bootstrap); a];
    let mut rng = block_rng(opts.seed, BOOTSTRAP_STREAM);
    for _ in 0..opts.bootstrap {
        let bm: Vec<f64> = members
            .iter()
            .map(|m| {
                (0..m.len())
                    .map(|_| logs[m[bounded(&mut rng, m.len() as u64) as usize]])
                    .sum::<f64>()
                    / m.len() as f64
            })
            .collect();
        for g in 0..a {
            boots[g].push((bm[g] - bm[r]).exp());
        }
    }
    let alpha = 1.0 - opts.confidence;
    let groups_out = (0..a)
        .map(|g| {
            let (lo, hi) = if opts.bootstrap == 0 {
                (f64::NAN, f64::NAN)
            } else {
                let mut b = boots[g].clone();
                b.sort_by(f64::total_cmp);
                (quantile(&b, alpha / 2.0), quantile(&b, 1.0 - alpha / 2.0))
            };
            SizeGroup {
                name: groups.levels()[g].clone(),
                n: members[g].len(),
                geometric_mean: means[g].exp(),
                ratio: (means[g] - means[r]).exp(),
                ratio_low: lo,
                ratio_high: hi,
            }
        })
        .collect();
    Ok(SizeTestResult {
        groups: groups_out,
        reference: groups.levels()[r].clone(),
        f: res.statistic,
        df: (a - 1, n - a),
        p_value: res.p_value,
        permutations: res.permutations,
        exact: res.exact,
        min_p: res.min_p,
        seed: res.seed,
        scheme: res.scheme,
        bootstrap: opts.bootstrap,
        confidence: opts.confidence,
    })
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;
    use rand::RngExt;

    /// Knuth's multiplication method for a Poisson draw (fine for means below ~100).
    pub(crate) fn poisson(rng: &mut impl rand::Rng, lambda: f64) -> f64 {
        let l = (-lambda).exp();
        let (mut k, mut p) = (0.0, 1.0);
        loop {
            p *= rng.random::<f64>();
            if p <= l {
                return k;
            }
            k += 1.0;
        }
    }

    /// Totals of simulated samples: 8 taxa with Poisson counts around group means
    /// `mu[g][j]`, each sample scaled by a lognormal nuisance factor (sd 0.3) shared
    /// by both groups.
    fn simulate(rng: &mut impl rand::Rng, mu: &[[f64; 8]; 2], per_group: usize) -> Vec<f64> {
        (0..2 * per_group)
            .map(|i| {
                let g = i / per_group;
                let z: f64 = (0..12).map(|_| rng.random::<f64>()).sum::<f64>() - 6.0; // ≈ N(0,1)
                let s = (0.3 * z).exp();
                mu[g].iter().map(|&m| poisson(rng, m * s)).sum()
            })
            .collect()
    }

    fn opts(seed: u64) -> SizeTestOptions {
        SizeTestOptions {
            permutations: 199,
            seed,
            scheme: Scheme::Free,
            bootstrap: 0,
            reference: 0,
            confidence: 0.95,
        }
    }

    #[test]
    fn simulations_with_known_truth() {
        // Known truth: (i) pure shape difference (same expected total, different
        // composition) -> the null holds for totals; (ii) pure size difference (same
        // composition, B's means doubled) -> the null is false.
        let comp_a = [20.0, 10.0, 8.0, 5.0, 3.0, 2.0, 1.0, 1.0]; // total 50
        let comp_b = [1.0, 1.0, 2.0, 3.0, 5.0, 8.0, 10.0, 20.0]; // total 50, reversed shape
        let doubled = comp_a.map(|m| 2.0 * m);
        let reps = 200;
        let g = Grouping::from_codes(&(0..20).map(|i| i / 10).collect::<Vec<_>>());
        let mut rng = block_rng(99, 0);
        let (mut rej_shape, mut rej_size) = (0, 0);
        for r in 0..reps {
            let t = simulate(&mut rng, &[comp_a, comp_b], 10);
            if size_test(&t, &g, &opts(r), None).unwrap().p_value <= 0.05 {
                rej_shape += 1;
            }
            let t = simulate(&mut rng, &[comp_a, doubled], 10);
            if size_test(&t, &g, &opts(r + 1000), None).unwrap().p_value <= 0.05 {
                rej_size += 1;
            }
        }
        // Under the null the rejection count is at most Binomial(200, 0.05) (the
        // permutation test is exact up to the Monte Carlo p; P(p <= 0.05) <= 0.05);
        // scipy.stats.binom.ppf(0.999, 200, 0.05) = 21, so > 21 fails with prob < 0.001.
        assert!(rej_shape <= 21, "pure shape: {rej_shape}/200 rejections");
        // Power under a doubling: log-sd ≈ sqrt(0.3² + 1/50) = 0.33 (lognormal factor plus
        // Poisson noise of a total near 50), 10 + 10 samples, so nc = ln 2 / 0.33 · √5 = 4.7
        // and t-test power = scipy.stats.nct.sf(t.ppf(0.975, 18), 18, 4.7) = 0.99; then
        // P(fewer than 190/200 rejections) = binom.cdf(189, 200, 0.99) < 0.001.
        assert!(rej_size >= 190, "pure size: {rej_size}/200 rejections");
    }

    #[test]
    fn ratio_and_bootstrap_interval() {
        // Group b is exactly twice group a, sample by sample: ratio of geometric means is
        // 2 and every bootstrap ratio lies in the range of possible resample means.
        let t = [10.0, 20.0, 40.0, 20.0, 40.0, 80.0];
        let g = Grouping::from_labels(&["a", "a", "a", "b", "b", "b"]);
        let o = SizeTestOptions {
            bootstrap: 999,
            ..opts(5)
        };
        let r = size_test(&t, &g, &o, None).unwrap();
        assert!((r.groups[1].ratio - 2.0).abs() < 1e-12);
        assert_eq!(r.groups[0].ratio, 1.0);
        assert!(r.groups[1].ratio_low < 2.0 && r.groups[1].ratio_high > 2.0);
        // A resampled geometric mean lies between the group's smallest and largest total.
        assert!(r.groups[1].ratio_low >= 20.0 / 40.0 && r.groups[1].ratio_high <= 80.0 / 10.0);
        // C(6,3) = 20 labelings <= 199: exact.
        assert!(r.exact);
        assert_eq!(r.reference, "a");
        let again = size_test(&t, &g, &o, None).unwrap();
        assert_eq!(r, again);
    }

    #[test]
    fn zero_totals_are_refused() {
        let g = Grouping::from_labels(&["a", "a", "b", "b"]);
        assert_eq!(
            size_test(&[1.0, 0.0, 2.0, 3.0], &g, &opts(1), None),
            Err(AnalysisError::EmptySamples { rows: vec![1] })
        );
    }
}
