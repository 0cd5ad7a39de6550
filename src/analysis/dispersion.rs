//! Test of homogeneity of multivariate dispersions (Anderson 2006, Biometrics
//! 62:245-253; docs/methods.md, "Dispersion"): distances of samples to their group
//! centroid computed from the Gower-centred matrix G, a one-way ANOVA F on those
//! distances and its permutation p-value, plus pairwise comparisons.
//!
//! Owns: [`distances_to_centroids`], [`oneway_f`], [`dispersion`], [`dispersion_pairwise`].

use nalgebra::DMatrix;
use serde::Serialize;

use super::gower::gower_centre;
use super::linear_model::Grouping;
use super::permutation::{self, PermutationOptions, PermutationResult, Permuter, Progress, Scheme};
use super::{AnalysisError, DistanceMatrix, prec};

/// Squared distances to the group centroid from G, valid with negative eigenvalues
/// (docs/methods.md, "Dispersion"): `z_i² = g_ii - (2/n_g) Σ_{k∈g} g_ik + (1/n_g²) Σ_{k,l∈g} g_kl`.
/// Negative values are set to 0; returns the distances `z_i` and the number clamped,
/// counting only values below `-EIG_ZERO · max_i |g_ii|` (a non-Euclidean D), not the
/// rounding error of a sample that sits on its centroid.
pub fn distances_to_centroids(g: &DMatrix<f64>, groups: &Grouping) -> (Vec<f64>, usize) {
    let n = g.nrows();
    let mut z = vec![0.0; n];
    let mut clamped = 0;
    let scale = (0..n).map(|i| g[(i, i)].abs()).fold(0.0, f64::max);
    let floor = -prec::EIG_ZERO * scale;
    for grp in 0..groups.n_groups() {
        let m = groups.members(grp);
        let ng = m.len() as f64;
        let row_sums: Vec<f64> = m
            .iter()
            .map(|&i| m.iter().map(|&k| g[(i, k)]).sum())
            .collect();
        let block: f64 = row_sums.iter().sum();
        for (&i, rs) in m.iter().zip(&row_sums) {
            let z2 = g[(i, i)] - 2.0 * rs / ng + block / (ng * ng);
            if z2 < floor {
                clamped += 1;
            }
            z[i] = z2.max(0.0).sqrt();
        }
    }
    (z, clamped)
}

/// Classical one-way ANOVA F of `values` by group codes 0..a-1:
/// `(SS_between/(a-1)) / (SS_within/(n-a))`. Infinite when SS_within is 0.
pub fn oneway_f(values: &[f64], codes: &[usize], a: usize) -> f64 {
    let n = values.len();
    let mut sum = vec![0.0; a];
    let mut cnt = vec![0usize; a];
    for (&v, &c) in values.iter().zip(codes) {
        sum[c] += v;
        cnt[c] += 1;
    }
    let grand = sum.iter().sum::<f64>() / n as f64;
    let mean: Vec<f64> = sum
        .iter()
        .zip(&cnt)
        .map(|(s, &c)| if c > 0 { s / c as f64 } else { 0.0 })
        .collect();
    let ssb: f64 = mean
        .iter()
        .zip(&cnt)
        .map(|(m, &c)| c as f64 * (m - grand).powi(2))
        .sum();
    let ssw: f64 = values
        .iter()
        .zip(codes)
        .map(|(v, &c)| (v - mean[c]).powi(2))
        .sum();
    (ssb / (a - 1) as f64) / (ssw / (n - a) as f64)
}

/// What is permuted to obtain the null distribution of F.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Permute {
    /// Least-squares residuals `z_i - z̄_g` (Anderson 2006; docs/methods.md, "Dispersion").
    Residuals,
    /// The distances `z_i` themselves (label permutation).
    Values,
}

/// Options of the dispersion test.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct DispersionOptions {
    /// Random permutations requested.
    pub permutations: usize,
    /// Generator seed.
    pub seed: u64,
    /// Exchangeability scheme.
    pub scheme: Scheme,
    /// Residuals or values.
    pub permute: Permute,
}

/// Dispersion of one group.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct DispersionGroup {
    /// Level name.
    pub name: String,
    /// Samples.
    pub n: usize,
    /// Mean distance to the group centroid.
    pub mean_distance: f64,
}

/// Result of the dispersion test.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct DispersionResult {
    /// Per-group size and mean distance.
    pub groups: Vec<DispersionGroup>,
    /// Distance of each sample to its group centroid.
    pub distances: Vec<f64>,
    /// Samples whose squared distance was negative and clamped to 0.
    pub clamped: usize,
    /// One-way F on the distances.
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
    /// Generator seed.
    pub seed: u64,
    /// Scheme, described.
    pub scheme: String,
    /// What was permuted.
    pub permute: Permute,
}

/// The one-way design checks shared with PERMANOVA.
fn validate(n: usize, groups: &Grouping) -> Result<(), AnalysisError> {
    super::permanova::check_groups(groups, n)
}

/// Permutation F test of `values` by `groups` with the engine of [`permutation`].
pub(crate) fn permuted_oneway(
    values: &[f64],
    groups: &Grouping,
    permute: Permute,
    scheme: &Scheme,
    opts: &PermutationOptions,
    progress: Option<Progress<'_>>,
) -> Result<PermutationResult, AnalysisError> {
    let (codes, a, n) = (groups.codes(), groups.n_groups(), values.len());
    let observed = oneway_f(values, codes, a);
    let pool: Vec<f64> = match permute {
        Permute::Values => values.to_vec(),
        Permute::Residuals => {
            let sizes = groups.sizes();
            let mut mean = vec![0.0; a];
            for (&v, &c) in values.iter().zip(codes) {
                mean[c] += v / sizes[c] as f64;
            }
            values
                .iter()
                .zip(codes)
                .map(|(v, &c)| v - mean[c])
                .collect()
        }
    };
    let permuter = Permuter::new(n, scheme, Some(codes))?;
    // Label sources (whole sites of unequal size) relabel the fixed values; bijections
    // move the values past fixed labels (the same thing for a bijection: F does not
    // change when values and labels are reordered together).
    let relabel = permuter.relabels();
    let stat = |perms: &[usize], out: &mut [f64]| {
        let mut buf = vec![0.0; n];
        let mut lab = vec![0usize; n];
        for (p, o) in perms.chunks(n).zip(out.iter_mut()) {
            if relabel {
                for (l, &src) in lab.iter_mut().zip(p) {
                    *l = codes[src];
                }
                *o = oneway_f(&pool, &lab, a);
            } else {
                for (b, &src) in buf.iter_mut().zip(p) {
                    *b = pool[src];
                }
                *o = oneway_f(&buf, codes, a);
            }
        }
    };
    permutation::permutation_test(&permuter, observed, opts, &stat, progress)
}

/// Anderson's (2006) test of homogeneity of dispersions about group centroids.
///
/// # Errors
/// [`AnalysisError::DimensionMismatch`], [`AnalysisError::TooFewGroups`],
/// [`AnalysisError::Saturated`] (n ≤ number of groups), and permuter errors.
pub fn dispersion(
    d: &DistanceMatrix,
    groups: &Grouping,
    opts: &DispersionOptions,
    progress: Option<Progress<'_>>,
) -> Result<DispersionResult, AnalysisError> {
    let n = d.n();
    validate(n, groups)?;
    let g = gower_centre(d);
    let (z, clamped) = distances_to_centroids(&g, groups);
    let popts = PermutationOptions {
        permutations: opts.permutations,
        seed: opts.seed,
    };
    let res = permuted_oneway(&z, groups, opts.permute, &opts.scheme, &popts, progress)?;
    let sizes = groups.sizes();
    let groups_out = (0..groups.n_groups())
        .map(|k| DispersionGroup {
            name: groups.levels()[k].clone(),
            n: sizes[k],
            mean_distance: groups.members(k).iter().map(|&i| z[i]).sum::<f64>() / sizes[k] as f64,
        })
        .collect();
    Ok(DispersionResult {
        groups: groups_out,
        distances: z,
        clamped,
        f: res.statistic,
        df: (groups.n_groups() - 1, n - groups.n_groups()),
        p_value: res.p_value,
        permutations: res.permutations,
        exact: res.exact,
        min_p: res.min_p,
        seed: res.seed,
        scheme: res.scheme,
        permute: opts.permute,
    })
}

/// One pairwise dispersion comparison.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct DispersionPair {
    /// First group.
    pub a: String,
    /// Second group.
    pub b: String,
    /// F on the distances of the two groups.
    pub f: f64,
    /// Permutation p-value.
    pub p_value: f64,
    /// Holm-adjusted.
    pub p_holm: f64,
    /// Benjamini–Hochberg-adjusted.
    pub p_bh: f64,
    /// Exactly enumerated.
    pub exact: bool,
}

/// Pairwise dispersion tests: the distances to centroids of the full analysis (a
/// group's centroid does not depend on the other groups), tested pair by pair.
///
/// # Errors
/// As [`dispersion`].
pub fn dispersion_pairwise(
    d: &DistanceMatrix,
    groups: &Grouping,
    opts: &DispersionOptions,
    progress: Option<Progress<'_>>,
) -> Result<Vec<DispersionPair>, AnalysisError> {
    validate(d.n(), groups)?;
    let (z, _) = distances_to_centroids(&gower_centre(d), groups);
    let popts = PermutationOptions {
        permutations: opts.permutations,
        seed: opts.seed,
    };
    let mut out = Vec::new();
    for x in 0..groups.n_groups() {
        for y in (x + 1)..groups.n_groups() {
            let idx: Vec<usize> = (0..d.n())
                .filter(|&i| [x, y].contains(&groups.codes()[i]))
                .collect();
            let zs: Vec<f64> = idx.iter().map(|&i| z[i]).collect();
            let sg = groups.subset(&idx);
            validate(idx.len(), &sg)?;
            let r = permuted_oneway(
                &zs,
                &sg,
                opts.permute,
                &opts.scheme.subset(&idx),
                &popts,
                progress,
            )?;
            out.push(DispersionPair {
                a: groups.levels()[x].clone(),
                b: groups.levels()[y].clone(),
                f: r.statistic,
                p_value: r.p_value,
                p_holm: 0.0,
                p_bh: 0.0,
                exact: r.exact,
            });
        }
    }
    let p: Vec<f64> = out.iter().map(|t| t.p_value).collect();
    for ((t, h), b) in out
        .iter_mut()
        .zip(permutation::holm(&p))
        .zip(permutation::benjamini_hochberg(&p))
    {
        t.p_holm = h;
        t.p_bh = b;
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::permanova::tests::{TOY, bray_curtis};

    #[test]
    fn a_sample_on_its_centroid_is_not_counted_as_clamped() {
        // One variable, Euclidean: z_i = |x_i - mean_g| (Anderson 2006); 12 is the mean
        // of 9, 12, 15, so its z is 0 up to rounding, which must not count as clamped.
        let x: [f64; 6] = [9.0, 12.0, 15.0, 20.0, 26.0, 17.0];
        let d = DistanceMatrix::from_fn(6, |i, k| (x[i] - x[k]).abs()).unwrap();
        let g = Grouping::from_labels(&["a", "a", "a", "b", "b", "b"]);
        let (z, clamped) = distances_to_centroids(&gower_centre(&d), &g);
        assert_eq!(clamped, 0);
        assert!(z[1].abs() < 1e-6);
        assert!((z[0] - 3.0).abs() < 1e-10);
    }

    #[test]
    fn toy_bray_curtis_distances_to_centroids() {
        // docs/methods.md, "The toy community", Bray-Curtis (two groups of 5): z values,
        // group means 0.200593 and 0.204433, ANOVA F = 0.0055746, derived from the
        // formula of docs/methods.md, "Dispersion" (computed with NumPy, no publication).
        let rows: Vec<Vec<f64>> = TOY.iter().map(|r| r.to_vec()).collect();
        let d = bray_curtis(&rows);
        let labels: Vec<&str> = (0..10).map(|i| if i < 5 { "A" } else { "B" }).collect();
        let g = Grouping::from_labels(&labels);
        let opts = DispersionOptions {
            permutations: 999,
            seed: 3,
            scheme: Scheme::Free,
            permute: Permute::Residuals,
        };
        let r = dispersion(&d, &g, &opts, None).unwrap();
        let expect = [
            0.146530, 0.176803, 0.288957, 0.101943, 0.288732, 0.087986, 0.192524, 0.231982,
            0.207040, 0.302635,
        ];
        for (z, e) in r.distances.iter().zip(expect) {
            assert!((z - e).abs() < 1e-6, "{z} vs {e}");
        }
        assert!((r.groups[0].mean_distance - 0.200593).abs() < 1e-6);
        assert!((r.groups[1].mean_distance - 0.204433).abs() < 1e-6);
        assert!((r.f - 0.0055746).abs() < 1e-7);
        assert_eq!(r.clamped, 0);
        assert!(r.p_value > 0.5);
    }

    #[test]
    fn exact_residual_permutation_counts_the_observed_arrangement() {
        // 3 + 3 samples on one variable: 20 distinct labellings, enumerated.
        // Permuting residuals of the full model gives the identity arrangement
        // F = 0, not the observed F; the observed data must still count once,
        // so p >= 1/20 (an exact p-value counts the observed arrangement:
        // Phipson & Smyth 2010, Stat. Appl. Genet. Mol. Biol. 9:39).
        let x: [f64; 6] = [0.0, 1.0, 2.0, 0.0, 10.0, 20.0];
        let d = DistanceMatrix::from_fn(6, |i, k| (x[i] - x[k]).abs()).unwrap();
        let g = Grouping::from_labels(&["a", "a", "a", "b", "b", "b"]);
        for permute in [Permute::Residuals, Permute::Values] {
            let opts = DispersionOptions {
                permutations: 999,
                seed: 1,
                scheme: Scheme::Free,
                permute,
            };
            let r = dispersion(&d, &g, &opts, None).unwrap();
            assert!(r.exact);
            assert_eq!(r.permutations, 20);
            assert!(
                r.p_value >= 1.0 / 20.0 - 1e-15,
                "{permute:?}: p = {}",
                r.p_value
            );
            assert!(r.p_value <= 1.0);
        }
    }
}
