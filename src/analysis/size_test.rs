//! The size test: one-way comparison of log sample totals between groups
//! (docs/methods.md, "The `compare` workflow", step (a)). Totals are given; effort
//! standardisation is the caller's job. The statistic is the one-way F on `ln t` with
//! a permutation p-value from the shared engine (PERMANOVA with Euclidean distance on
//! one variable is this F: Anderson 2001; docs/methods.md, "PERMANOVA"). The effect
//! size is the ratio of each group's geometric mean total to the reference group's,
//! with a seeded percentile-bootstrap interval that resamples samples within groups.
//!
//! [`rate_test`] is the default of `compare`: pooled rates Σ count ÷ Σ effort of a
//! log-linear count model, which keeps samples that caught nothing.
//!
//! Owns: [`size_test`], [`rate_test`], [`SizeModel`], [`SizeTestOptions`],
//! [`SizeTestResult`].

use super::prec::quantile;
use serde::Serialize;

use super::AnalysisError;
use super::dispersion::{Permute, permuted_oneway};
use super::linear_model::Grouping;
use super::permutation::{
    self, PermutationOptions, PermutationResult, Permuter, Progress, Scheme, block_rng, bounded,
};

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
    /// The site of every sample, when sites repeat: the bootstrap then resamples whole
    /// sites (within each group when every site belongs to one group) instead of
    /// samples within groups.
    pub clusters: Option<Vec<usize>>,
}

/// How the size of a group is summarised and tested.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, serde::Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum SizeModel {
    /// Pooled rate Σ count ÷ Σ effort of each group (the fitted rate of a log-linear
    /// Poisson model with log-effort offset), tested by a quasi-Poisson deviance F;
    /// samples that caught nothing count.
    #[default]
    Rate,
    /// Geometric mean of the totals, tested by the one-way F on log totals; only for
    /// strictly positive totals.
    Geometric,
}

impl SizeModel {
    /// The name used on the command line and in JSON.
    pub fn as_str(self) -> &'static str {
        match self {
            SizeModel::Rate => "rate",
            SizeModel::Geometric => "geometric",
        }
    }
}

/// Size summary of one group.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SizeGroup {
    /// Level name.
    pub name: String,
    /// Samples.
    pub n: usize,
    /// Geometric mean total `exp(mean ln t)` ([`SizeModel::Geometric`]) or pooled rate
    /// `Σ y / Σ e` ([`SizeModel::Rate`]).
    pub level: f64,
    /// `level` relative to the reference group's.
    pub ratio: f64,
    /// Lower percentile-bootstrap bound of the ratio (NaN when no bootstrap).
    pub ratio_low: f64,
    /// Upper bound.
    pub ratio_high: f64,
}

/// Result of the size test.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SizeTestResult {
    /// How size was summarised and tested.
    pub model: SizeModel,
    /// Per group.
    pub groups: Vec<SizeGroup>,
    /// Name of the reference group.
    pub reference: String,
    /// One-way F on ln(total) ([`SizeModel::Geometric`]) or the quasi-Poisson deviance
    /// F `(ΔD / (a − 1)) / (X² / (n − a))` ([`SizeModel::Rate`]).
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
    #[serde(rename = "smallest_possible_p")]
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
    check_totals(totals)?;
    let empty: Vec<usize> = (0..n).filter(|&i| totals[i] == 0.0).collect();
    if !empty.is_empty() {
        return Err(AnalysisError::EmptySamples { rows: empty });
    }
    check_design(groups, n, opts)?;
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

    let mean_log = |idx: &[usize]| idx.iter().map(|&i| logs[i]).sum::<f64>() / idx.len() as f64;
    summarise(
        SizeModel::Geometric,
        groups,
        opts,
        &res,
        |rows: &[usize]| mean_log(rows),
    )
}

/// Compare pooled rates between groups, keeping samples that caught nothing: `counts`
/// are sample totals, `effort` their effort (all 1 for raw totals). The fitted rate
/// of group g in the log-linear Poisson model with log-effort offset is the pooled
/// rate `R_g = Σ_g y / Σ_g e` (McCullagh & Nelder 1989, Generalized Linear Models,
/// ch. 6), so the ratio of two groups is the ratio of their pooled rates. The
/// permutation statistic is the deviance of the group term over the Pearson
/// dispersion of the group model, `F = (ΔD/(a − 1)) / (X²/(n − a))` with
/// `ΔD = 2 Σ_g Y_g ln(R_g / R)`, so overdispersion is left to the permutation test
/// (docs/methods.md, "Counts with effort").
///
/// # Errors
/// As [`size_test`], except that zero totals are accepted;
/// [`AnalysisError::InvalidArgument`] for effort that is not positive, or when the
/// reference group (or the whole selection) caught nothing.
pub fn rate_test(
    counts: &[f64],
    effort: &[f64],
    groups: &Grouping,
    opts: &SizeTestOptions,
    progress: Option<Progress<'_>>,
) -> Result<SizeTestResult, AnalysisError> {
    let n = counts.len();
    if groups.n() != n || effort.len() != n {
        return Err(AnalysisError::DimensionMismatch {
            expected: n,
            found: if effort.len() != n {
                effort.len()
            } else {
                groups.n()
            },
        });
    }
    check_totals(counts)?;
    if let Some(row) = effort.iter().position(|e| !(e.is_finite() && *e > 0.0)) {
        return Err(AnalysisError::InvalidArgument {
            name: "effort",
            reason: format!(
                "sample {row} has effort {}; effort must be positive",
                effort[row]
            ),
        });
    }
    check_design(groups, n, opts)?;
    let a = groups.n_groups();
    let codes = groups.codes();
    let reference_total: f64 = (0..n)
        .filter(|&i| codes[i] == opts.reference)
        .map(|i| counts[i])
        .sum();
    if reference_total == 0.0 {
        return Err(AnalysisError::InvalidArgument {
            name: "reference",
            reason: format!(
                "the reference group {} caught nothing, so no ratio to it exists; choose \
                 another reference",
                groups.levels()[opts.reference]
            ),
        });
    }
    let observed = rate_f(counts, effort, codes, a);
    let permuter = Permuter::new(n, &opts.scheme, Some(codes))?;
    let relabel = permuter.relabels();
    let stat = |perms: &[usize], out: &mut [f64]| {
        let (mut y, mut e, mut c) = (vec![0.0; n], vec![0.0; n], vec![0usize; n]);
        for (p, o) in perms.chunks(n).zip(out.iter_mut()) {
            if relabel {
                for (ci, &src) in c.iter_mut().zip(p) {
                    *ci = codes[src];
                }
                *o = rate_f(counts, effort, &c, a);
            } else {
                for (i, &src) in p.iter().enumerate() {
                    y[i] = counts[src];
                    e[i] = effort[src];
                }
                *o = rate_f(&y, &e, codes, a);
            }
        }
    };
    let popts = PermutationOptions {
        permutations: opts.permutations,
        seed: opts.seed,
    };
    let res = permutation::permutation_test(&permuter, observed, &popts, &stat, progress)?;
    summarise(SizeModel::Rate, groups, opts, &res, |rows: &[usize]| {
        (rows.iter().map(|&i| counts[i]).sum::<f64>()
            / rows.iter().map(|&i| effort[i]).sum::<f64>())
        .ln()
    })
}

/// The quasi-Poisson deviance F of a one-factor rate model (see [`rate_test`]).
fn rate_f(y: &[f64], e: &[f64], codes: &[usize], a: usize) -> f64 {
    let n = y.len();
    let (mut sy, mut se) = (vec![0.0; a], vec![0.0; a]);
    for i in 0..n {
        sy[codes[i]] += y[i];
        se[codes[i]] += e[i];
    }
    let r_all = sy.iter().sum::<f64>() / se.iter().sum::<f64>();
    let dev: f64 = 2.0
        * (0..a)
            .filter(|&g| sy[g] > 0.0)
            .map(|g| sy[g] * ((sy[g] / se[g]) / r_all).ln())
            .sum::<f64>();
    let chi2: f64 = (0..n)
        .map(|i| {
            let mu = e[i] * sy[codes[i]] / se[codes[i]];
            if mu > 0.0 {
                (y[i] - mu).powi(2) / mu
            } else {
                0.0
            }
        })
        .sum();
    (dev / (a - 1) as f64) / (chi2 / (n - a) as f64)
}

/// Totals must be finite and not negative (row, column 0 in the error).
fn check_totals(totals: &[f64]) -> Result<(), AnalysisError> {
    if let Some(row) = totals.iter().position(|t| !t.is_finite()) {
        return Err(AnalysisError::NonFinite { row, col: 0 });
    }
    if let Some(row) = totals.iter().position(|&t| t < 0.0) {
        return Err(AnalysisError::Negative { row, col: 0 });
    }
    Ok(())
}

/// The checks every size model shares: at least two groups, residual df, a valid
/// reference and coverage.
fn check_design(groups: &Grouping, n: usize, opts: &SizeTestOptions) -> Result<(), AnalysisError> {
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
    if let Some(c) = &opts.clusters
        && c.len() != n
    {
        return Err(AnalysisError::DimensionMismatch {
            expected: n,
            found: c.len(),
        });
    }
    Ok(())
}

/// The rows of each group in one bootstrap resample: samples within groups, or whole
/// sites (`clusters`) — within each group when every site belongs to one group, over
/// all sites otherwise (a group's rows are then those of the drawn sites in it).
fn resample(
    rng: &mut rand::rngs::ChaCha8Rng,
    members: &[Vec<usize>],
    clusters: Option<&(Vec<Vec<usize>>, bool)>,
    codes: &[usize],
) -> Vec<Vec<usize>> {
    match clusters {
        None => members
            .iter()
            .map(|m| {
                (0..m.len())
                    .map(|_| m[bounded(rng, m.len() as u64) as usize])
                    .collect()
            })
            .collect(),
        Some((sites, nested)) => {
            let mut out = vec![Vec::new(); members.len()];
            if *nested {
                for (g, o) in out.iter_mut().enumerate() {
                    let own: Vec<&Vec<usize>> = sites.iter().filter(|s| codes[s[0]] == g).collect();
                    for _ in 0..own.len() {
                        o.extend_from_slice(own[bounded(rng, own.len() as u64) as usize]);
                    }
                }
            } else {
                for _ in 0..sites.len() {
                    for &i in &sites[bounded(rng, sites.len() as u64) as usize] {
                        out[codes[i]].push(i);
                    }
                }
            }
            out
        }
    }
}

/// Group levels, ratios to the reference and their percentile-bootstrap intervals,
/// from `log_level` (the log of the summary of a set of rows) and the permutation
/// result `res`. Ratios are `exp` of differences of logs.
fn summarise(
    model: SizeModel,
    groups: &Grouping,
    opts: &SizeTestOptions,
    res: &PermutationResult,
    log_level: impl Fn(&[usize]) -> f64,
) -> Result<SizeTestResult, AnalysisError> {
    let (a, n) = (groups.n_groups(), groups.n());
    let codes = groups.codes();
    let members: Vec<Vec<usize>> = (0..a).map(|g| groups.members(g)).collect();
    let levels: Vec<f64> = members.iter().map(|m| log_level(m)).collect();
    let r = opts.reference;
    let clusters = opts.clusters.as_ref().map(|c| {
        let k = c.iter().max().map_or(0, |m| m + 1);
        let mut sites = vec![Vec::new(); k];
        for (i, &s) in c.iter().enumerate() {
            sites[s].push(i);
        }
        sites.retain(|s| !s.is_empty());
        let nested = sites
            .iter()
            .all(|s| s.iter().all(|&i| codes[i] == codes[s[0]]));
        (sites, nested)
    });
    let mut boots = vec![Vec::with_capacity(opts.bootstrap); a];
    let mut rng = block_rng(opts.seed, BOOTSTRAP_STREAM);
    for _ in 0..opts.bootstrap {
        let rows = resample(&mut rng, &members, clusters.as_ref(), codes);
        let bl: Vec<f64> = rows
            .iter()
            .map(|m| if m.is_empty() { f64::NAN } else { log_level(m) })
            .collect();
        for g in 0..a {
            boots[g].push((bl[g] - bl[r]).exp());
        }
    }
    let alpha = 1.0 - opts.confidence;
    let groups_out = (0..a)
        .map(|g| {
            let mut b: Vec<f64> = boots[g].iter().copied().filter(|x| x.is_finite()).collect();
            let (lo, hi) = if b.is_empty() {
                (f64::NAN, f64::NAN)
            } else {
                b.sort_by(f64::total_cmp);
                (quantile(&b, alpha / 2.0), quantile(&b, 1.0 - alpha / 2.0))
            };
            SizeGroup {
                name: groups.levels()[g].clone(),
                n: members[g].len(),
                level: levels[g].exp(),
                ratio: (levels[g] - levels[r]).exp(),
                ratio_low: lo,
                ratio_high: hi,
            }
        })
        .collect();
    Ok(SizeTestResult {
        model,
        groups: groups_out,
        reference: groups.levels()[r].clone(),
        f: res.statistic,
        df: (a - 1, n - a),
        p_value: res.p_value,
        permutations: res.permutations,
        exact: res.exact,
        min_p: res.min_p,
        seed: res.seed,
        scheme: res.scheme.clone(),
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
            clusters: None,
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

    #[test]
    fn rate_ratio_keeps_zero_catches_and_equals_the_poisson_glm() {
        // tests/reference/count_model.json, "one_factor": 30 samples (7 caught nothing)
        // with unequal effort; statsmodels GLM Poisson with offset log(effort): the
        // group coefficient is the log rate ratio, and its Pearson chi-square is the
        // X² of the group model.
        let fx: serde_json::Value =
            serde_json::from_str(include_str!("../../tests/reference/count_model.json")).unwrap();
        let c = &fx["cases"]["one_factor"];
        let vec = |k: &str| -> Vec<f64> {
            c[k].as_array()
                .unwrap()
                .iter()
                .map(|v| v.as_f64().unwrap())
                .collect()
        };
        let (y, e) = (vec("y"), vec("effort"));
        assert!(y.contains(&0.0));
        let labels: Vec<&str> = c["codes"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| if v.as_u64().unwrap() == 0 { "a" } else { "b" })
            .collect();
        let g = Grouping::from_labels(&labels);
        let o = SizeTestOptions {
            bootstrap: 199,
            ..opts(3)
        };
        let r = rate_test(&y, &e, &g, &o, None).unwrap();
        assert_eq!(r.model, SizeModel::Rate);
        let beta = c["params"][1].as_f64().unwrap();
        assert!((r.groups[1].ratio - beta.exp()).abs() <= 1e-8 * beta.exp());
        let rates = vec("pooled_rates");
        assert!((r.groups[0].level - rates[0]).abs() <= 1e-12 * rates[0]);
        assert!(
            r.groups[1].ratio_low < r.groups[1].ratio && r.groups[1].ratio < r.groups[1].ratio_high
        );
        // X² of the group model: the denominator of the deviance F.
        let codes = g.codes();
        let chi2: f64 = (0..y.len())
            .map(|i| {
                let mu = e[i] * rates[codes[i]];
                (y[i] - mu).powi(2) / mu
            })
            .sum();
        let expect = c["pearson_chi2"].as_f64().unwrap();
        assert!((chi2 - expect).abs() <= 1e-8 * expect);
        // The geometric model refuses the same data: its logs are undefined at zero.
        assert!(size_test(&y, &g, &opts(3), None).is_err());
    }

    #[test]
    fn dropping_zero_catches_inflates_the_sparse_group() {
        // A group that often catches nothing: group b's three empty samples count,
        // so its pooled rate is 6/6 = 1, half of a's 10/5 = 2 (by hand); dropping
        // them would make the two groups look equal.
        let y = [2.0, 2.0, 2.0, 2.0, 2.0, 0.0, 0.0, 0.0, 2.0, 2.0, 2.0];
        let e = [1.0; 11];
        let labels = ["a", "a", "a", "a", "a", "b", "b", "b", "b", "b", "b"];
        let g = Grouping::from_labels(&labels);
        let r = rate_test(&y, &e, &g, &opts(4), None).unwrap();
        assert!((r.groups[1].ratio - 0.5).abs() < 1e-12);
    }
}
