//! Trends across years: is a change in abundance (size), in composition
//! (shape), or both?
//!
//! Owns: the per-period summaries ([`PeriodResult`]: geometric-mean abundance
//! with a t interval, change against a baseline, centroid distance in the
//! shape-only space, and the size and shape parts of the combined
//! dissimilarity between the period and the baseline), the year-label
//! permutation ([`YearLabels`], [`year_permutations`]), the trend tests of size
//! and shape with site as a blocking factor, the breakpoint search with a
//! max-F permutation p-value, the [`Diagnosis`] rule, and the Student t
//! quantile ([`t_quantile`]) the intervals need.
//!
//! **Model.** Samples are indexed by site and year (and, with seasons, by
//! season). Both trend tests fit `[1, site, (season)]` as the reduced model and
//! add one year column (the year itself for the linear trend, a 0/1 step for a
//! breakpoint). On the Gower-centred matrix G of a dissimilarity, with
//! `R = I − H_reduced`, `G_R = R G R` and `x` the added column,
//! `SS_term = x'G_R x / x'R x`, `F = SS_term / ((tr G_R − SS_term)/(n − k_r − 1))`
//! (McArdle & Anderson 2001, Ecology 82:290-297). For size, G is the outer
//! product of the log abundances, so F is the classical partial F of OLS.
//!
//! **Permutations.** Years are the exchangeable units (sites share year-to-year
//! fluctuations, so single samples are not exchangeable): a permutation of the
//! *distinct years* relabels every sample of year y with year π(y); each sample
//! keeps its site, season and data. In a balanced site × year grid this is the
//! synchronised whole-block permutation of Freedman–Lane residuals under the
//! site model (tested below); it also works when years have unequal numbers of
//! samples, where `Scheme::WholeBlocks` cannot be used. Because x only depends on
//! the year, `x = A v` (A: samples × years indicators), so every permuted
//! statistic is `v_π' M v_π / v_π' N v_π` with `M = A'G_R A`, `N = A'R A`
//! precomputed: O(k²) per permutation for k years.

use super::prec::quantile;
use nalgebra::{DMatrix, DVector};
use serde::{Deserialize, Serialize};

use super::DistanceMatrix;
use super::count_model::{
    GroupedScore, PoissonFit, ScoreTest, all_zero_levels, poisson_glm, pooled_rates,
    rate_log_variance,
};
use super::gower::gower_centre;
use super::linear_model::{Basis, Grouping};
use super::permutation::{BLOCK, Permuter, Scheme, at_least, benjamini_hochberg, block_rng};
use super::size_test::SizeModel;
use super::{AnalysisError, prec};

/// Which periods form the baseline.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Baseline {
    /// The first `m` years present (the first `m` periods when periods are years).
    FirstYears(usize),
    /// Years `a..=b`.
    Years(i32, i32),
}

/// Which breakpoint to test.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum BreakpointSpec {
    /// Search every year that leaves at least two years on each side.
    Auto,
    /// This year as the first year "after".
    Year(i32),
}

/// Options of [`trend`].
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TrendOptions {
    /// The baseline periods.
    pub baseline: Baseline,
    /// Breakpoint test, if wanted.
    pub breakpoint: Option<BreakpointSpec>,
    /// Significance level of the diagnosis.
    pub alpha: f64,
    /// Periods (and comparison groups) with fewer samples get no summaries.
    pub min_samples: usize,
    /// Random year permutations (exact enumeration when the years have no more
    /// arrangements than this).
    pub permutations: usize,
    /// Seed of the permutation streams.
    pub seed: u64,
}

/// The per-sample inputs of a trend.
#[derive(Debug, Clone, Copy)]
pub struct TrendData<'a> {
    /// Natural log of abundance (per unit effort) of each sample.
    pub log_abundance: &'a [f64],
    /// Shape-only dissimilarity (Hellinger, chi-square).
    pub shape: &'a DistanceMatrix,
    /// Combined (size and shape) dissimilarity, e.g. Bray-Curtis.
    pub combined: &'a DistanceMatrix,
    /// Year of each sample.
    pub year: &'a [i32],
    /// Season code of each sample (codes in chronological order within a year),
    /// or `None` when periods are years.
    pub season: Option<&'a [usize]>,
    /// Site code of each sample.
    pub site: &'a [usize],
    /// Every row's count and effort, rows that caught nothing included: when
    /// given, size is the log-linear count model of these rows ([`CountData`])
    /// and `log_abundance` only enters the size and shape parts of the combined
    /// distance; when `None`, size is the geometric-mean model on `log_abundance`.
    pub counts: Option<CountData<'a>>,
}

/// The rows of the count model of size: every row of the selection, rows that
/// caught nothing included (they have no composition, so the shape inputs of
/// [`TrendData`] leave them out).
#[derive(Debug, Clone, Copy)]
pub struct CountData<'a> {
    /// Total count of each row.
    pub count: &'a [f64],
    /// Sampling effort of each row (the offset is its log).
    pub effort: &'a [f64],
    /// Year of each row.
    pub year: &'a [i32],
    /// Season code of each row (as [`TrendData::season`]).
    pub season: Option<&'a [usize]>,
    /// Site code of each row.
    pub site: &'a [usize],
}

/// Summaries of one period.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PeriodResult {
    /// Year of the period.
    pub year: i32,
    /// Season code (`None` when periods are years).
    pub season: Option<usize>,
    /// Samples in the period.
    pub n: usize,
    /// Distinct sites in the period.
    pub sites: usize,
    /// True for baseline periods.
    pub baseline: bool,
    /// True when the period (or its comparison group) has fewer than the minimum
    /// number of samples: listed, without summaries.
    pub too_few: bool,
    /// Samples in the comparison group (the baseline, of the same season, less
    /// this period).
    pub n_reference: usize,
    /// Geometric mean abundance (per unit effort) over the period's samples.
    pub abundance: Option<f64>,
    /// Lower end of its 95 % interval (t-based on the log scale, back-transformed).
    pub ci_low: Option<f64>,
    /// Upper end of its 95 % interval.
    pub ci_high: Option<f64>,
    /// `100 (exp(mean log − reference mean log) − 1)`.
    pub change_pct: Option<f64>,
    /// Distance between the period's centroid and the reference centroid in the
    /// shape-only space.
    pub shape_distance: Option<f64>,
    /// Distance between the two centroids in the combined space.
    pub combined_distance: Option<f64>,
    /// Part of the squared combined centroid distance that the log sample total
    /// accounts for.
    pub size_part: Option<f64>,
    /// Part of the squared combined centroid distance left once size is
    /// accounted for (`size_part + shape_part = combined_distance²`).
    pub shape_part: Option<f64>,
}

/// The size trend: abundance on year, site as a blocking factor.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SizeTrend {
    /// The size model: the log-linear count model (`Rate`) or OLS of the log
    /// totals (`Geometric`).
    pub model: SizeModel,
    /// Year coefficient per year, given site (and season): of the Poisson
    /// log-linear model with log-effort offset (`Rate`), or the OLS slope of
    /// ln(abundance) (`Geometric`).
    pub slope_log: f64,
    /// `100 (e^slope − 1)`: % change per year.
    pub slope_pct_per_year: f64,
    /// Lower end of the 95 % interval of the % change per year (from the year
    /// permutation distribution of slopes refitted to full-model residuals).
    pub ci_low: f64,
    /// Upper end of that interval.
    pub ci_high: f64,
    /// Standard error of the slope from the model alone (treats samples as
    /// independent given site): OLS (`Geometric`), or Poisson scaled by the
    /// Pearson dispersion of the full model (quasi-Poisson, `Rate`).
    pub se_log: f64,
    /// Pearson dispersion `X² / df` of the full count model (`Rate` only).
    pub dispersion: Option<f64>,
    /// Partial F of year given site (`Geometric`); for `Rate`, the Rao score
    /// statistic of year given site divided by the Pearson dispersion of the
    /// reduced fit (a 1-df quasi-score F).
    pub pseudo_f: f64,
    /// Year-permutation p-value.
    pub p_value: f64,
    /// Residual degrees of freedom.
    pub df_resid: usize,
}

/// The shape trend: db-RDA of the shape-only dissimilarity on year given site.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ShapeTrend {
    /// Semi-partial R² of year (share of tr G).
    pub r2: f64,
    /// Pseudo-F of year given site.
    pub pseudo_f: f64,
    /// Year-permutation p-value.
    pub p_value: f64,
    /// Residual degrees of freedom.
    pub df_resid: usize,
}

/// The best before/after split for one aspect.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BreakpointResult {
    /// First year of the "after" part.
    pub year: i32,
    /// Pseudo-F of the step at that year, given site.
    pub pseudo_f: f64,
    /// Permutation p-value of the largest F over the candidates (max-F under
    /// each year permutation), so the search is accounted for.
    pub p_value: f64,
    /// Candidate years searched (1 for a given year).
    pub candidates: usize,
    /// Size: % change after vs before; shape: semi-partial R² of the step.
    pub effect: f64,
}

/// Breakpoints of size and shape.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Breakpoints {
    /// Size breakpoint.
    pub size: BreakpointResult,
    /// Shape breakpoint.
    pub shape: BreakpointResult,
}

/// What changed.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Diagnosis {
    /// Size changed, shape did not.
    Abundance,
    /// Shape changed, size did not.
    Composition,
    /// Both changed.
    Both,
    /// Neither changed detectably.
    None,
}

impl Diagnosis {
    /// From the two decisions.
    pub fn from_changes(size: bool, shape: bool) -> Diagnosis {
        match (size, shape) {
            (true, false) => Diagnosis::Abundance,
            (false, true) => Diagnosis::Composition,
            (true, true) => Diagnosis::Both,
            (false, false) => Diagnosis::None,
        }
    }

    /// The lowercase name.
    pub fn name(self) -> &'static str {
        match self {
            Diagnosis::Abundance => "abundance",
            Diagnosis::Composition => "composition",
            Diagnosis::Both => "both",
            Diagnosis::None => "none",
        }
    }
}

/// A complete trend analysis.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TrendResult {
    /// Samples.
    pub n: usize,
    /// Distinct years.
    pub years: Vec<i32>,
    /// Distinct sites.
    pub sites: usize,
    /// Baseline years.
    pub baseline_years: Vec<i32>,
    /// One entry per period, in time order.
    pub periods: Vec<PeriodResult>,
    /// Size trend test.
    pub size_trend: SizeTrend,
    /// Shape trend test.
    pub shape_trend: ShapeTrend,
    /// Breakpoint tests, when asked.
    pub breakpoints: Option<Breakpoints>,
    /// The p-value the size decision used (trend alone, or Bonferroni over
    /// trend and breakpoint: `min(1, 2 min(p_trend, p_break))`).
    pub size_decision_p: f64,
    /// The p-value the shape decision used.
    pub shape_decision_p: f64,
    /// The diagnosis at `alpha`.
    pub diagnosis: Diagnosis,
    /// Alpha used.
    pub alpha: f64,
    /// Permutations evaluated (all arrangements when exact).
    pub permutations: usize,
    /// True when every arrangement of the years was enumerated.
    pub exact: bool,
    /// Seed.
    pub seed: u64,
    /// Permutation scheme, described.
    pub scheme: String,
    /// Smallest p-value the trend tests can give: `1/(P + 1)` for random
    /// relabellings, `1/k!` (`2/k!` for equally spaced years, whose reversal
    /// gives the same linear-trend statistic) under exact enumeration.
    pub smallest_possible_p: f64,
    /// Plain-language notes.
    pub notes: Vec<String>,
}

// ------------------------------------------------------------------ year labels

/// The distinct years of a set of samples and each sample's year index: the
/// object a year permutation acts on.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct YearLabels {
    years: Vec<i32>,
    code: Vec<usize>,
}

impl YearLabels {
    /// Years of each sample.
    pub fn new(year: &[i32]) -> Self {
        let mut years = year.to_vec();
        years.sort_unstable();
        years.dedup();
        let code = year
            .iter()
            .map(|y| {
                years
                    .binary_search(y)
                    .expect("invariant: y is a distinct year")
            })
            .collect();
        YearLabels { years, code }
    }

    /// Distinct years, ascending.
    pub fn years(&self) -> &[i32] {
        &self.years
    }

    /// Year index of each sample.
    pub fn codes(&self) -> &[usize] {
        &self.code
    }

    /// The year of every sample after the permutation `perm` of the distinct
    /// years (length k): year index j becomes year `years[perm[j]]`, for every
    /// sample of that year at once.
    pub fn apply(&self, perm: &[usize]) -> Vec<i32> {
        self.code.iter().map(|&c| self.years[perm[c]]).collect()
    }
}

/// The permutations of `k` distinct years a test evaluates: every arrangement
/// (identity first) when `k!` is at most `permutations`, else `permutations`
/// seeded random ones, drawn with the generator streams of
/// [`super::permutation::permutation_test`] (block b of [`BLOCK`] draws from
/// stream b). Returns the permutations and whether they are exhaustive.
///
/// # Errors
/// [`AnalysisError::InvalidArgument`] when `permutations` is 0.
pub fn year_permutations(
    k: usize,
    permutations: usize,
    seed: u64,
) -> Result<(Vec<Vec<usize>>, bool), AnalysisError> {
    if permutations == 0 {
        return Err(AnalysisError::InvalidArgument {
            name: "permutations",
            reason: "must be at least 1".into(),
        });
    }
    let permuter = Permuter::new(k, &Scheme::Free, None)?;
    if permuter
        .distinct()
        .is_some_and(|d| d <= permutations as u128)
    {
        return Ok((permuter.enumerate(), true));
    }
    let mut out = Vec::with_capacity(permutations);
    for b in 0..permutations.div_ceil(BLOCK) {
        let mut rng = block_rng(seed, b as u64);
        for _ in 0..BLOCK.min(permutations - b * BLOCK) {
            let mut p = vec![0; k];
            permuter.random(&mut rng, &mut p);
            out.push(p);
        }
    }
    Ok((out, false))
}

/// p-value of `observed` among permuted statistics (`(b + 1)/(P + 1)`, or
/// `b/P` over an exhaustive enumeration that includes the identity).
fn p_value(observed: f64, stats: &[f64], exact: bool) -> f64 {
    let b = stats.iter().filter(|&&s| at_least(s, observed)).count();
    if exact {
        b as f64 / stats.len() as f64
    } else {
        (b + 1) as f64 / (stats.len() + 1) as f64
    }
}

// ------------------------------------------------------------------ year model

/// The partial model "one year column given site (and season)" on a centred
/// matrix, reduced to k × k matrices over the years.
#[derive(Debug, Clone)]
pub struct YearModel {
    m: DMatrix<f64>,
    nmat: DMatrix<f64>,
    counts: Vec<f64>,
    tr_gr: f64,
    tr_g: f64,
    df_resid: usize,
}

impl YearModel {
    /// Build from the centred matrix `g`, the reduced basis and the year index of
    /// each sample (k years).
    ///
    /// # Errors
    /// [`AnalysisError::DimensionMismatch`]; [`AnalysisError::Saturated`] when the
    /// reduced model plus one column leaves no residual degrees of freedom.
    pub fn new(
        g: &DMatrix<f64>,
        reduced: &Basis,
        code: &[usize],
        k: usize,
    ) -> Result<YearModel, AnalysisError> {
        let n = g.nrows();
        if g.ncols() != n || reduced.n() != n || code.len() != n {
            return Err(AnalysisError::DimensionMismatch {
                expected: n,
                found: code.len(),
            });
        }
        if reduced.rank() + 1 >= n {
            return Err(AnalysisError::Saturated {
                rank: reduced.rank() + 1,
                n,
            });
        }
        let q = reduced.q();
        let gr = super::permanova::residualise(g, q);
        let mut m: DMatrix<f64> = DMatrix::zeros(k, k);
        for i in 0..n {
            for j in 0..n {
                m[(code[i], code[j])] += gr[(i, j)];
            }
        }
        // A'RA = diag(counts) − (A'Q)(A'Q)'
        let mut aq: DMatrix<f64> = DMatrix::zeros(k, q.ncols());
        let mut counts = vec![0.0; k];
        for i in 0..n {
            counts[code[i]] += 1.0;
            for c in 0..q.ncols() {
                aq[(code[i], c)] += q[(i, c)];
            }
        }
        let mut nmat: DMatrix<f64> = -(&aq * aq.transpose());
        for (j, c) in counts.iter().enumerate() {
            nmat[(j, j)] += c;
        }
        Ok(YearModel {
            tr_gr: gr.trace(),
            tr_g: g.trace(),
            m,
            nmat,
            counts,
            df_resid: n - reduced.rank() - 1,
        })
    }

    /// Residual degrees of freedom of the full model.
    pub fn df_resid(&self) -> usize {
        self.df_resid
    }

    /// `tr G`.
    pub fn total(&self) -> f64 {
        self.tr_g
    }

    /// `x'Rx` for `x = A v`, or `None` when the column lies (numerically) in the
    /// reduced model.
    fn xrx(&self, v: &[f64]) -> Option<f64> {
        let v = centred(v);
        let d = (v.transpose() * &self.nmat * &v)[(0, 0)];
        let scale: f64 = v.iter().zip(&self.counts).map(|(a, c)| a * a * c).sum();
        (d > 1e-10 * scale && d > 0.0).then_some(d)
    }

    /// Sum of squares of the column `x = A v` given the reduced model.
    pub fn ss(&self, v: &[f64]) -> Option<f64> {
        let d = self.xrx(v)?;
        let vv = centred(v);
        Some((vv.transpose() * &self.m * &vv)[(0, 0)] / d)
    }

    /// Pseudo-F of the column `x = A v` given the reduced model (0 when the
    /// column adds nothing).
    pub fn pseudo_f(&self, v: &[f64]) -> f64 {
        match self.ss(v) {
            Some(ss) => {
                let res = (self.tr_gr - ss).max(0.0);
                if res <= 0.0 {
                    f64::INFINITY
                } else {
                    ss / (res / self.df_resid as f64)
                }
            }
            None => 0.0,
        }
    }
}

/// `v` less its mean: a constant lies in the reduced model (which holds the
/// intercept), so this changes no statistic and avoids cancellation with
/// calendar years.
fn centred(v: &[f64]) -> DVector<f64> {
    let m = v.iter().sum::<f64>() / v.len().max(1) as f64;
    DVector::from_iterator(v.len(), v.iter().map(|x| x - m))
}

/// The reduced basis `[1, site, (season)]`.
fn reduced_basis(site: &[usize], season: Option<&[usize]>) -> Result<Basis, AnalysisError> {
    let n = site.len();
    let mut b = Basis::intercept(n).extended(&Grouping::from_codes(site).treatment_columns())?;
    if let Some(s) = season {
        b = b.extended(&Grouping::from_codes(s).treatment_columns())?;
    }
    Ok(b)
}

/// Squared distance between the centroids of samples `a` and `b` from a
/// Gower-centred matrix: `mean_aa g + mean_bb g − 2 mean_ab g`.
pub fn centroid_distance_sq(g: &DMatrix<f64>, a: &[usize], b: &[usize]) -> f64 {
    let block = |x: &[usize], y: &[usize]| -> f64 {
        let mut s = 0.0;
        for &i in x {
            for &j in y {
                s += g[(i, j)];
            }
        }
        s / (x.len() * y.len()) as f64
    };
    block(a, a) + block(b, b) - 2.0 * block(a, b)
}

/// Size and shape parts of the squared combined centroid distance `delta2`
/// between groups `a` and `b`: with z the group indicator and s the log size,
/// among the samples of a and b, the share of `SS(z)` left by `SS(z | s)` goes
/// to shape and the rest to size.
fn two_group_parts(
    combined: &DistanceMatrix,
    log_size: &[f64],
    a: &[usize],
    b: &[usize],
    delta2: f64,
) -> Result<(f64, f64), AnalysisError> {
    let idx: Vec<usize> = a.iter().chain(b).copied().collect();
    let n = idx.len();
    let g = gower_centre(&combined.subset(&idx));
    let z = DMatrix::from_fn(n, 1, |i, _| if i < a.len() { 1.0 } else { 0.0 });
    let s = DMatrix::from_fn(n, 1, |i, _| log_size[idx[i]]);
    let one = Basis::intercept(n);
    let bz = one.extended(&z)?;
    let bs = one.extended(&s)?;
    let bsz = bs.extended(&z)?;
    let ss_z = bz.trace_hg(&g);
    let ss_z_given_s = bsz.trace_hg(&g) - bs.trace_hg(&g);
    if prec::not_positive(ss_z.abs() - 1e-12 * g.trace().abs().max(f64::MIN_POSITIVE)) {
        return Ok((0.0, 0.0));
    }
    let shape_share = ss_z_given_s / ss_z;
    Ok((delta2 * (1.0 - shape_share), delta2 * shape_share))
}

fn mean_sd(v: &[f64]) -> (f64, f64) {
    let n = v.len() as f64;
    let m = v.iter().sum::<f64>() / n;
    let var = if v.len() > 1 {
        v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (n - 1.0)
    } else {
        f64::NAN
    };
    (m, var.sqrt())
}

fn pct(b: f64) -> f64 {
    100.0 * (b.exp() - 1.0)
}

/// Pooled rate `Σy / Σe` of some rows and its 95 % interval: the ratio
/// estimator's variance of [`rate_log_variance`] on the log scale, with a t
/// quantile on n − 1 df, so the interval stays positive. No interval for fewer
/// than two rows or a rate of zero.
fn rate_interval(y: &[f64], e: &[f64]) -> Result<(f64, Option<(f64, f64)>), AnalysisError> {
    let (r, var_log) = rate_log_variance(y, e);
    let Some(v) = var_log else {
        return Ok((r, None));
    };
    let half = t_quantile(0.975, (y.len() - 1) as f64)? * v.sqrt();
    Ok((r, Some((r * (-half).exp(), r * half.exp()))))
}

/// Codes 0, 1, … in order of first appearance.
pub(crate) fn recode(codes: &[usize]) -> Vec<usize> {
    let mut seen: Vec<usize> = Vec::new();
    codes
        .iter()
        .map(|c| {
            seen.iter().position(|s| s == c).unwrap_or_else(|| {
                seen.push(*c);
                seen.len() - 1
            })
        })
        .collect()
}

fn confounded() -> AnalysisError {
    AnalysisError::InvalidArgument {
        name: "year",
        reason: "year is confounded with site: no site is sampled in two years".into(),
    }
}

/// The size side of a trend: what every year relabelling needs.
enum SizeSide {
    /// OLS of ln(abundance) on year given site (and season).
    Geometric {
        model: YearModel,
        q: DMatrix<f64>,
        ry: DVector<f64>,
        code: Vec<usize>,
        /// `A'e`: full-model residuals summed per year.
        ae: Vec<f64>,
        slope: f64,
        se: f64,
    },
    /// Poisson log-linear model `log mu = site + (season) + b·year + log effort`.
    Rate {
        /// Score test of year columns against the reduced fit.
        reduced: GroupedScore,
        /// Pearson dispersion of the reduced fit.
        scale: f64,
        /// One-step slopes from the full fit's residuals.
        residual: GroupedScore,
        fit: PoissonFit,
        y: Vec<f64>,
        x: DMatrix<f64>,
        offset: Vec<f64>,
        code: Vec<usize>,
    },
}

impl SizeSide {
    fn geometric(
        log: &[f64],
        reduced: &Basis,
        code: &[usize],
        k: usize,
        yearv: &[f64],
    ) -> Result<SizeSide, AnalysisError> {
        let n = log.len();
        let y = DVector::from_column_slice(log);
        let g_size = &y * y.transpose();
        let model = YearModel::new(&g_size, reduced, code, k)?;
        let q = reduced.q().clone();
        let ry = &y - &q * (q.transpose() * &y);
        let x = DVector::from_fn(n, |i, _| yearv[code[i]]);
        let rx = &x - &q * (q.transpose() * &x);
        let xrx = rx.dot(&rx);
        if prec::not_positive(xrx) {
            return Err(confounded());
        }
        let slope = rx.dot(&ry) / xrx;
        let e = &ry - &rx * slope;
        let se = (e.dot(&e) / model.df_resid() as f64 / xrx).sqrt();
        let mut ae = vec![0.0; k];
        for i in 0..n {
            ae[code[i]] += e[i];
        }
        Ok(SizeSide::Geometric {
            model,
            q,
            ry,
            code: code.to_vec(),
            ae,
            slope,
            se,
        })
    }

    /// The count model on every row of `c` (`code`: year index of each row) but
    /// those of sites, then seasons, that caught nothing at all (their effects have
    /// no finite estimate and they carry no information on change; noted).
    fn rate(
        c: &CountData<'_>,
        code: &[usize],
        k: usize,
        yearv: &[f64],
        notes: &mut Vec<String>,
    ) -> Result<SizeSide, AnalysisError> {
        let n_sites = c.site.iter().max().map_or(0, |m| m + 1);
        let zero_sites = all_zero_levels(c.count, c.site, n_sites);
        let mut keep: Vec<usize> = (0..c.count.len())
            .filter(|&i| !zero_sites.contains(&c.site[i]))
            .collect();
        if !zero_sites.is_empty() {
            notes.push(format!(
                "{} caught nothing in any period: a site effect cannot be estimated \
                 from zeros alone, and such a site says nothing about change, so its rows are \
                 left out of the size trend",
                crate::words::count(zero_sites.len(), "site", "sites")
            ));
        }
        if let Some(season) = c.season {
            let ys: Vec<f64> = keep.iter().map(|&i| c.count[i]).collect();
            let ss: Vec<usize> = keep.iter().map(|&i| season[i]).collect();
            let n_seasons = ss.iter().max().map_or(0, |m| m + 1);
            let zero = all_zero_levels(&ys, &ss, n_seasons);
            if !zero.is_empty() {
                keep.retain(|&i| !zero.contains(&season[i]));
                notes.push(format!(
                    "{} caught nothing in any year: left out of the size trend",
                    crate::words::count(zero.len(), "season", "seasons")
                ));
            }
        }
        let y: Vec<f64> = keep.iter().map(|&i| c.count[i]).collect();
        let offset: Vec<f64> = keep.iter().map(|&i| c.effort[i].ln()).collect();
        let site = recode(&keep.iter().map(|&i| c.site[i]).collect::<Vec<_>>());
        let season = c
            .season
            .map(|s| recode(&keep.iter().map(|&i| s[i]).collect::<Vec<_>>()));
        let ycode: Vec<usize> = keep.iter().map(|&i| code[i]).collect();
        let n = y.len();
        let mut cols = vec![DMatrix::from_element(n, 1, 1.0)];
        cols.push(Grouping::from_codes(&site).treatment_columns());
        if let Some(s) = &season {
            cols.push(Grouping::from_codes(s).treatment_columns());
        }
        let width: usize = cols.iter().map(DMatrix::ncols).sum();
        let mut x = DMatrix::zeros(n, width);
        let mut at = 0;
        for m in &cols {
            x.columns_mut(at, m.ncols()).copy_from(m);
            at += m.ncols();
        }
        if n <= width + 1 {
            return Err(AnalysisError::Saturated { rank: width + 1, n });
        }
        let fit_r = poisson_glm(&y, &x, &offset)?;
        let reduced = ScoreTest::new(&y, &x, &fit_r).grouped(&ycode, k);
        if reduced.parts(yearv).is_none() {
            return Err(confounded());
        }
        let scale = fit_r.dispersion();
        let scale = if scale.is_finite() && scale > 0.0 {
            scale
        } else {
            1.0
        };
        let full = x.clone().insert_column(width, 0.0);
        let mut full = full;
        for i in 0..n {
            full[(i, width)] = yearv[ycode[i]];
        }
        let fit = poisson_glm(&y, &full, &offset)?;
        let residual = ScoreTest::new(&y, &x, &fit).grouped(&ycode, k);
        Ok(SizeSide::Rate {
            reduced,
            scale,
            residual,
            fit,
            y,
            x,
            offset,
            code: ycode,
        })
    }

    fn model(&self) -> SizeModel {
        match self {
            SizeSide::Geometric { .. } => SizeModel::Geometric,
            SizeSide::Rate { .. } => SizeModel::Rate,
        }
    }

    /// The test statistic of the year column `A v` (0 when it adds nothing).
    fn statistic(&self, v: &[f64]) -> f64 {
        match self {
            SizeSide::Geometric { model, .. } => model.pseudo_f(v),
            SizeSide::Rate { reduced, scale, .. } => {
                let s = reduced.statistic(v);
                if s.is_nan() { 0.0 } else { s / scale }
            }
        }
    }

    /// The slope of the year column `A v` refitted to the full model's residuals.
    fn refitted_slope(&self, v: &[f64]) -> f64 {
        match self {
            SizeSide::Geometric { model, ae, .. } => {
                let num: f64 = v.iter().zip(ae).map(|(a, b)| a * b).sum();
                model.xrx(v).map_or(0.0, |d| num / d)
            }
            SizeSide::Rate { residual, .. } => residual.one_step(v),
        }
    }

    /// `(slope, se, dispersion, df_resid)` of the observed year column.
    fn estimate(&self) -> (f64, f64, Option<f64>, usize) {
        match self {
            SizeSide::Geometric {
                slope, se, model, ..
            } => (*slope, *se, None, model.df_resid()),
            SizeSide::Rate { fit, .. } => {
                let last = fit.coefficients.len() - 1;
                (
                    fit.coefficients[last],
                    fit.scaled_std_errors()[last],
                    Some(fit.dispersion()),
                    fit.df_resid,
                )
            }
        }
    }

    /// The log-scale effect of the year-level column `v` (a 0/1 step) given site.
    fn effect(&self, v: &[f64]) -> Result<f64, AnalysisError> {
        match self {
            SizeSide::Geometric { q, ry, code, .. } => {
                let xs = DVector::from_fn(code.len(), |i, _| v[code[i]]);
                let rxs = &xs - q * (q.transpose() * &xs);
                Ok(rxs.dot(ry) / rxs.dot(&rxs))
            }
            SizeSide::Rate {
                y, x, offset, code, ..
            } => {
                let w = x.ncols();
                let mut full = x.clone().insert_column(w, 0.0);
                for i in 0..code.len() {
                    full[(i, w)] = v[code[i]];
                }
                let fit = poisson_glm(y, &full, offset)?;
                Ok(fit.coefficients[w])
            }
        }
    }
}

// ------------------------------------------------------------------ the analysis

/// The whole trend analysis of `data` (see the module documentation).
///
/// # Errors
/// [`AnalysisError::DimensionMismatch`] when inputs disagree in length;
/// [`AnalysisError::NonFinite`] for a non-finite log abundance, count or effort;
/// [`AnalysisError::Negative`] for a negative count;
/// [`AnalysisError::TooFewYears`] for fewer than 3 years (4 with a breakpoint
/// search); [`AnalysisError::InvalidArgument`] for a baseline with no samples,
/// a given breakpoint year without a year on each side, a shape row whose year
/// has no count row, non-positive effort, or alpha outside (0, 1);
/// [`AnalysisError::Saturated`] when site (and season) leave no residual df;
/// the count model's errors ([`poisson_glm`]).
pub fn trend(data: &TrendData<'_>, opts: &TrendOptions) -> Result<TrendResult, AnalysisError> {
    let n = data.log_abundance.len();
    for len in [
        data.shape.n(),
        data.combined.n(),
        data.year.len(),
        data.site.len(),
        data.season.map_or(n, <[usize]>::len),
    ] {
        if len != n {
            return Err(AnalysisError::DimensionMismatch {
                expected: n,
                found: len,
            });
        }
    }
    if let Some(i) = data.log_abundance.iter().position(|v| !v.is_finite()) {
        return Err(AnalysisError::NonFinite { row: i, col: 0 });
    }
    if let Some(c) = &data.counts {
        let nc = c.count.len();
        for len in [
            c.effort.len(),
            c.year.len(),
            c.site.len(),
            c.season.map_or(nc, <[usize]>::len),
        ] {
            if len != nc {
                return Err(AnalysisError::DimensionMismatch {
                    expected: nc,
                    found: len,
                });
            }
        }
        if data.season.is_some() != c.season.is_some() {
            return Err(AnalysisError::InvalidArgument {
                name: "season",
                reason: "the count rows and the shape rows must both have seasons or neither"
                    .into(),
            });
        }
        if let Some(i) = c.count.iter().position(|v| !v.is_finite()) {
            return Err(AnalysisError::NonFinite { row: i, col: 0 });
        }
        if let Some(i) = c.count.iter().position(|v| *v < 0.0) {
            return Err(AnalysisError::Negative { row: i, col: 0 });
        }
        if let Some(i) = c.effort.iter().position(|e| !(e.is_finite() && *e > 0.0)) {
            return Err(AnalysisError::InvalidArgument {
                name: "effort",
                reason: format!(
                    "row {i} has effort {}: the count model needs positive effort",
                    c.effort[i]
                ),
            });
        }
    }
    if !(opts.alpha > 0.0 && opts.alpha < 1.0) {
        return Err(AnalysisError::InvalidArgument {
            name: "alpha",
            reason: format!("must be between 0 and 1, got {}", opts.alpha),
        });
    }
    // The years are those of the count rows when given (the shape rows are a subset).
    let size_year: &[i32] = data.counts.as_ref().map_or(data.year, |c| c.year);
    let size_site: &[usize] = data.counts.as_ref().map_or(data.site, |c| c.site);
    let size_season: Option<&[usize]> = match &data.counts {
        Some(c) => c.season,
        None => data.season,
    };
    let labels = YearLabels::new(size_year);
    let years = labels.years().to_vec();
    let k = years.len();
    let shape_code: Vec<usize> = data
        .year
        .iter()
        .map(|y| {
            years
                .binary_search(y)
                .map_err(|_| AnalysisError::InvalidArgument {
                    name: "year",
                    reason: format!("a shape row's year {y} has no count row"),
                })
        })
        .collect::<Result<_, _>>()?;
    let min_years = if opts.breakpoint == Some(BreakpointSpec::Auto) {
        4
    } else {
        3
    };
    if k < min_years {
        return Err(AnalysisError::TooFewYears {
            found: k,
            min: min_years,
        });
    }
    let mut notes = Vec::new();

    // Baseline.
    let baseline_years: Vec<i32> = match opts.baseline {
        Baseline::FirstYears(m) => years.iter().take(m.max(1)).copied().collect(),
        Baseline::Years(a, b) => years
            .iter()
            .filter(|y| (a..=b).contains(*y))
            .copied()
            .collect(),
    };
    if baseline_years.is_empty() {
        return Err(AnalysisError::InvalidArgument {
            name: "baseline",
            reason: "no samples fall in the baseline years".into(),
        });
    }

    let g_shape = gower_centre(data.shape);
    let g_comb = gower_centre(data.combined);

    // Periods: those of the count rows (all rows), or of the shape rows.
    let size_n = size_year.len();
    let mut keys: Vec<(i32, Option<usize>)> = (0..size_n)
        .map(|i| (size_year[i], size_season.map(|s| s[i])))
        .collect();
    keys.sort_unstable();
    keys.dedup();
    // Rows of a period, and its comparison group: the baseline rows of the same
    // season, less the period's year.
    let rows_of = |year_of: &[i32], season_of: Option<&[usize]>, key: (i32, Option<usize>)| {
        let m = year_of.len();
        let members: Vec<usize> = (0..m)
            .filter(|&i| year_of[i] == key.0 && season_of.map(|s| s[i]) == key.1)
            .collect();
        let reference: Vec<usize> = (0..m)
            .filter(|&i| {
                baseline_years.contains(&year_of[i])
                    && season_of.map(|s| s[i]) == key.1
                    && year_of[i] != key.0
            })
            .collect();
        (members, reference)
    };
    let min = opts.min_samples.max(2);
    let mut periods = Vec::with_capacity(keys.len());
    let mut few = Vec::new();
    let mut shape_few = 0usize;
    let mut no_interval = 0usize;
    for &(year, season) in &keys {
        let (members, reference) = rows_of(data.year, data.season, (year, season));
        let (size_members, size_reference) = match &data.counts {
            Some(c) => rows_of(c.year, c.season, (year, season)),
            None => (members.clone(), reference.clone()),
        };
        let mut sites: Vec<usize> = size_members.iter().map(|&i| size_site[i]).collect();
        sites.sort_unstable();
        sites.dedup();
        let too_few = size_members.len() < min || size_reference.len() < min;
        let mut p = PeriodResult {
            year,
            season,
            n: size_members.len(),
            sites: sites.len(),
            baseline: baseline_years.contains(&year),
            too_few,
            n_reference: size_reference.len(),
            abundance: None,
            ci_low: None,
            ci_high: None,
            change_pct: None,
            shape_distance: None,
            combined_distance: None,
            size_part: None,
            shape_part: None,
        };
        if too_few {
            few.push(year);
            periods.push(p);
            continue;
        }
        match &data.counts {
            None => {
                let logs: Vec<f64> = members.iter().map(|&i| data.log_abundance[i]).collect();
                let (m, sd) = mean_sd(&logs);
                let half =
                    t_quantile(0.975, (logs.len() - 1) as f64)? * sd / (logs.len() as f64).sqrt();
                let ref_logs: Vec<f64> = reference.iter().map(|&i| data.log_abundance[i]).collect();
                let (m_ref, _) = mean_sd(&ref_logs);
                p.abundance = Some(m.exp());
                p.ci_low = Some((m - half).exp());
                p.ci_high = Some((m + half).exp());
                p.change_pct = Some(pct(m - m_ref));
            }
            Some(c) => {
                let pick = |rows: &[usize], v: &[f64]| -> Vec<f64> {
                    rows.iter().map(|&i| v[i]).collect()
                };
                let (r, ci) = rate_interval(
                    &pick(&size_members, c.count),
                    &pick(&size_members, c.effort),
                )?;
                let (r_ref, _) = rate_interval(
                    &pick(&size_reference, c.count),
                    &pick(&size_reference, c.effort),
                )?;
                p.abundance = Some(r);
                if let Some((lo, hi)) = ci {
                    p.ci_low = Some(lo);
                    p.ci_high = Some(hi);
                } else {
                    no_interval += 1;
                }
                p.change_pct = (r_ref > 0.0).then(|| 100.0 * (r / r_ref - 1.0));
            }
        }
        if members.len() < min || reference.len() < min {
            shape_few += 1;
            periods.push(p);
            continue;
        }
        p.shape_distance = Some(
            centroid_distance_sq(&g_shape, &members, &reference)
                .max(0.0)
                .sqrt(),
        );
        let delta2 = centroid_distance_sq(&g_comb, &members, &reference);
        p.combined_distance = Some(delta2.max(0.0).sqrt());
        let (size_part, shape_part) = two_group_parts(
            data.combined,
            data.log_abundance,
            &members,
            &reference,
            delta2,
        )?;
        p.size_part = Some(size_part);
        p.shape_part = Some(shape_part);
        periods.push(p);
    }
    if !few.is_empty() {
        notes.push(format!(
            "{} with fewer than {min} samples (or a comparison group that small) listed without summaries",
            crate::words::count(few.len(), "period", "periods"),
        ));
    }
    if shape_few > 0 {
        notes.push(format!(
            "{shape_few} period(s) have fewer than {min} rows that caught anything (or a \
             comparison group that small): their abundance is given, their composition \
             summaries are not"
        ));
    }
    if no_interval > 0 {
        notes.push(format!(
            "{no_interval} period(s) caught nothing: their rate is 0, with no interval"
        ));
    }

    // Trend tests.
    let reduced = reduced_basis(data.site, data.season)?;
    let shape_model = YearModel::new(&g_shape, &reduced, &shape_code, k)?;
    // Years relative to the first (constants change nothing; avoids cancellation).
    let yearv: Vec<f64> = years.iter().map(|&y| f64::from(y - years[0])).collect();
    let size = match &data.counts {
        None => SizeSide::geometric(data.log_abundance, &reduced, &shape_code, k, &yearv)?,
        Some(c) => SizeSide::rate(c, labels.codes(), k, &yearv, &mut notes)?,
    };
    let (perms, exact) = year_permutations(k, opts.permutations, opts.seed)?;
    let permuted =
        |perm: &[usize], values: &[f64]| -> Vec<f64> { perm.iter().map(|&j| values[j]).collect() };
    let mut f_size = Vec::with_capacity(perms.len());
    let mut f_shape = Vec::with_capacity(perms.len());
    let mut slopes = Vec::with_capacity(perms.len());
    for perm in &perms {
        let v = permuted(perm, &yearv);
        f_size.push(size.statistic(&v));
        f_shape.push(shape_model.pseudo_f(&v));
        slopes.push(size.refitted_slope(&v));
    }
    let f_size_obs = size.statistic(&yearv);
    let f_shape_obs = shape_model.pseudo_f(&yearv);
    slopes.sort_by(f64::total_cmp);
    let (lo, hi) = (quantile(&slopes, 0.025), quantile(&slopes, 0.975));
    let (slope, se_log, dispersion, df_resid) = size.estimate();
    let size_trend = SizeTrend {
        model: size.model(),
        slope_log: slope,
        slope_pct_per_year: pct(slope),
        ci_low: pct(slope - hi),
        ci_high: pct(slope - lo),
        se_log,
        dispersion,
        pseudo_f: f_size_obs,
        p_value: p_value(f_size_obs, &f_size, exact),
        df_resid,
    };
    let shape_trend = ShapeTrend {
        r2: shape_model.ss(&yearv).unwrap_or(0.0) / shape_model.total(),
        pseudo_f: f_shape_obs,
        p_value: p_value(f_shape_obs, &f_shape, exact),
        df_resid: shape_model.df_resid(),
    };

    // Breakpoints.
    let breakpoints = match opts.breakpoint {
        None => None,
        Some(spec) => {
            let candidates: Vec<usize> = match spec {
                BreakpointSpec::Auto => (2..=k - 2).collect(),
                BreakpointSpec::Year(yr) => {
                    let j = years.iter().position(|&y| y >= yr).unwrap_or(k);
                    if j == 0 || j >= k {
                        return Err(AnalysisError::InvalidArgument {
                            name: "breakpoint",
                            reason: format!(
                                "year {yr} leaves no year before or after it (years {}..{})",
                                years[0],
                                years[k - 1]
                            ),
                        });
                    }
                    vec![j]
                }
            };
            let step = |perm: &[usize], j: usize| -> Vec<f64> {
                perm.iter()
                    .map(|&p| if p >= j { 1.0 } else { 0.0 })
                    .collect()
            };
            let identity: Vec<usize> = (0..k).collect();
            let search = |stat: &dyn Fn(&[f64]) -> f64| -> (usize, f64, Vec<f64>) {
                let (mut best, mut best_f) = (candidates[0], f64::NEG_INFINITY);
                for &j in &candidates {
                    let f = stat(&step(&identity, j));
                    if f > best_f {
                        best = j;
                        best_f = f;
                    }
                }
                let maxes = perms
                    .iter()
                    .map(|perm| {
                        candidates
                            .iter()
                            .map(|&j| stat(&step(perm, j)))
                            .fold(f64::NEG_INFINITY, f64::max)
                    })
                    .collect();
                (best, best_f, maxes)
            };
            let (js, fs, ms) = search(&|v| size.statistic(v));
            let (jh, fh, mh) = search(&|v| shape_model.pseudo_f(v));
            let b_step = size.effect(&step(&identity, js))?;
            let hv = step(&identity, jh);
            Some(Breakpoints {
                size: BreakpointResult {
                    year: years[js],
                    pseudo_f: fs,
                    p_value: p_value(fs, &ms, exact),
                    candidates: candidates.len(),
                    effect: pct(b_step),
                },
                shape: BreakpointResult {
                    year: years[jh],
                    pseudo_f: fh,
                    p_value: p_value(fh, &mh, exact),
                    candidates: candidates.len(),
                    effect: shape_model.ss(&hv).unwrap_or(0.0) / shape_model.total(),
                },
            })
        }
    };

    // Diagnosis.
    let decision = |trend_p: f64, bp: Option<&BreakpointResult>| match bp {
        Some(b) => (2.0 * trend_p.min(b.p_value)).min(1.0),
        None => trend_p,
    };
    let size_decision_p = decision(size_trend.p_value, breakpoints.as_ref().map(|b| &b.size));
    let shape_decision_p = decision(shape_trend.p_value, breakpoints.as_ref().map(|b| &b.shape));
    let diagnosis = Diagnosis::from_changes(
        size_decision_p <= opts.alpha,
        shape_decision_p <= opts.alpha,
    );
    let mut sites: Vec<usize> = size_site.to_vec();
    sites.sort_unstable();
    sites.dedup();
    let scheme = format!(
        "whole years ({k} years relabelled together across all sites; site{} held fixed)",
        if data.season.is_some() {
            ", season"
        } else {
            ""
        }
    );
    let smallest_possible_p = smallest_p(&yearv, perms.len(), exact);
    Ok(TrendResult {
        n: size_n,
        years,
        sites: sites.len(),
        baseline_years,
        periods,
        size_trend,
        shape_trend,
        breakpoints,
        size_decision_p,
        shape_decision_p,
        diagnosis,
        alpha: opts.alpha,
        permutations: perms.len(),
        exact,
        seed: opts.seed,
        scheme,
        smallest_possible_p,
        notes,
    })
}

/// The smallest p-value of a linear-trend test over `evaluated` year
/// relabellings: `1/(P + 1)` for random ones; under exact enumeration `1/k!`, or
/// `2/k!` for equally spaced years, whose reversed relabelling gives the same
/// linear-trend statistic.
fn smallest_p(yearv: &[f64], evaluated: usize, exact: bool) -> f64 {
    let k = yearv.len();
    let mirrored =
        (0..k).all(|j| (yearv[j] + yearv[k - 1 - j] - (yearv[0] + yearv[k - 1])).abs() < 1e-9);
    if exact {
        (if mirrored { 2.0 } else { 1.0 }) / evaluated as f64
    } else {
        1.0 / (evaluated + 1) as f64
    }
}

// ------------------------------------------------------------------ one value per row

/// The trend of one strictly positive value per row (a diversity index, say) on
/// the log scale: the geometric size side of [`trend`] applied to the value.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LogTrend {
    /// Rows used.
    pub n: usize,
    /// Distinct years.
    pub years: Vec<i32>,
    /// Distinct sites.
    pub sites: usize,
    /// OLS slope of ln(value) on year given site (and season).
    pub slope_log: f64,
    /// The slope as % change per year.
    pub pct_per_year: f64,
    /// The fitted change from the first year to the last, in %.
    pub change_pct: f64,
    /// 95 % interval of the % per year (slopes refitted to full-model residuals
    /// under the same year relabellings).
    pub ci_low: f64,
    /// Upper end.
    pub ci_high: f64,
    /// Partial pseudo-F of year given site (and season).
    pub pseudo_f: f64,
    /// Permutation p-value of whole-year relabellings.
    pub p_value: f64,
    /// Residual degrees of freedom.
    pub df_resid: usize,
    /// Relabellings evaluated.
    pub permutations: usize,
    /// True when every arrangement of the years was enumerated.
    pub exact: bool,
    /// Smallest p-value the test can give.
    pub smallest_possible_p: f64,
}

/// The log-linear trend of `values` (one per row, all > 0) across years, with a
/// site effect (and a season effect), tested by relabelling whole years across
/// all sites at once as [`trend`] does:
/// docs/methods.md, "Trends across years (`tally trend`)". The year relabellings depend only on the number of years,
/// `permutations` and `seed`, so several values of the same rows are tested
/// under the same relabellings.
///
/// # Errors
/// [`AnalysisError::DimensionMismatch`]; [`AnalysisError::NonFinite`] or
/// [`AnalysisError::InvalidArgument`] for a value that is not finite and
/// positive; [`AnalysisError::TooFewYears`] for fewer than 3 years;
/// [`AnalysisError::Saturated`]; year confounded with site.
pub fn log_trend(
    values: &[f64],
    year: &[i32],
    site: &[usize],
    season: Option<&[usize]>,
    permutations: usize,
    seed: u64,
) -> Result<LogTrend, AnalysisError> {
    let n = values.len();
    for len in [year.len(), site.len(), season.map_or(n, <[usize]>::len)] {
        if len != n {
            return Err(AnalysisError::DimensionMismatch {
                expected: n,
                found: len,
            });
        }
    }
    if let Some(i) = values.iter().position(|v| !v.is_finite()) {
        return Err(AnalysisError::NonFinite { row: i, col: 0 });
    }
    if let Some(i) = values.iter().position(|v| prec::not_positive(*v)) {
        return Err(AnalysisError::InvalidArgument {
            name: "values",
            reason: format!("row {i} holds {}: its logarithm is undefined", values[i]),
        });
    }
    let labels = YearLabels::new(year);
    let years = labels.years().to_vec();
    let k = years.len();
    if k < 3 {
        return Err(AnalysisError::TooFewYears { found: k, min: 3 });
    }
    let site = recode(site);
    let season = season.map(recode);
    let reduced = reduced_basis(&site, season.as_deref())?;
    let yearv: Vec<f64> = years.iter().map(|&y| f64::from(y - years[0])).collect();
    let logs: Vec<f64> = values.iter().map(|v| v.ln()).collect();
    let side = SizeSide::geometric(&logs, &reduced, labels.codes(), k, &yearv)?;
    let (perms, exact) = year_permutations(k, permutations, seed)?;
    let mut stats = Vec::with_capacity(perms.len());
    let mut slopes = Vec::with_capacity(perms.len());
    for perm in &perms {
        let v: Vec<f64> = perm.iter().map(|&j| yearv[j]).collect();
        stats.push(side.statistic(&v));
        slopes.push(side.refitted_slope(&v));
    }
    let observed = side.statistic(&yearv);
    slopes.sort_by(f64::total_cmp);
    let (lo, hi) = (quantile(&slopes, 0.025), quantile(&slopes, 0.975));
    let (slope, _, _, df_resid) = side.estimate();
    let sites = site.iter().max().map_or(0, |m| m + 1);
    Ok(LogTrend {
        n,
        sites,
        slope_log: slope,
        pct_per_year: pct(slope),
        change_pct: pct(slope * yearv[k - 1]),
        ci_low: pct(slope - hi),
        ci_high: pct(slope - lo),
        pseudo_f: observed,
        p_value: p_value(observed, &stats, exact),
        df_resid,
        permutations: perms.len(),
        exact,
        smallest_possible_p: smallest_p(&yearv, perms.len(), exact),
        years,
    })
}

// ------------------------------------------------------------------ one taxon at a time

/// The size trend of one taxon ([`taxon_trends`]).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TaxonTrend {
    /// Column of the taxon in the count matrix.
    pub column: usize,
    /// Organisms of the taxon over all rows.
    pub individuals: f64,
    /// Year coefficient of the taxon's log-linear count model given site (and
    /// season), `None` when it has no finite estimate (see `not_estimated`).
    pub slope_log: Option<f64>,
    /// `100 (e^slope − 1)`: % change per year.
    pub pct_per_year: Option<f64>,
    /// Lower end of the 95 % interval of the % per year (slopes refitted to the
    /// full model's residuals under the year relabellings, as [`trend`]).
    pub ci_low: Option<f64>,
    /// Upper end.
    pub ci_high: Option<f64>,
    /// Quasi-Poisson standard error of the slope (Pearson dispersion of the fit).
    pub se_log: Option<f64>,
    /// Pearson dispersion of the taxon's full model.
    pub dispersion: Option<f64>,
    /// Year-relabelling p-value of the taxon's quasi-score statistic.
    pub p_value: Option<f64>,
    /// Benjamini–Hochberg adjusted across the taxa with a p-value.
    pub p_adjusted: Option<f64>,
    /// Pooled rate of each year (Σ count ÷ Σ effort over the year's rows).
    pub yearly_rates: Vec<f64>,
    /// Why the slope was not estimated.
    pub not_estimated: Option<String>,
}

/// Every taxon's size trend under one set of year relabellings.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TaxonTrends {
    /// Distinct years (the order of `yearly_rates`).
    pub years: Vec<i32>,
    /// Per taxon with organisms, in column order.
    pub taxa: Vec<TaxonTrend>,
    /// Relabellings evaluated.
    pub permutations: usize,
    /// True when every arrangement of the years was enumerated.
    pub exact: bool,
    /// Smallest p-value the test can give.
    pub smallest_possible_p: f64,
}

/// Whether the year slope of one taxon's Poisson model with site effects has a
/// finite maximum-likelihood estimate. Within a site, the log-likelihood of the
/// slope falls without bound as the slope grows unless all the site's organisms
/// are in its last sampled year, and as it shrinks unless they are all in its
/// first; the sum over sites has a finite maximum exactly when some site bounds
/// it above and some site bounds it below (the separation condition of Albert &
/// Anderson 1984, Biometrika 71:1–10, for this one-slope model).
fn slope_has_estimate(count: &[f64], code: &[usize], site: &[usize]) -> bool {
    let n_sites = site.iter().max().map_or(0, |m| m + 1);
    let (mut above, mut below) = (false, false);
    for s in 0..n_sites {
        let rows: Vec<usize> = (0..count.len()).filter(|&i| site[i] == s).collect();
        let (Some(first), Some(last)) = (
            rows.iter().map(|&i| code[i]).min(),
            rows.iter().map(|&i| code[i]).max(),
        ) else {
            continue;
        };
        above |= rows.iter().any(|&i| count[i] > 0.0 && code[i] < last);
        below |= rows.iter().any(|&i| count[i] > 0.0 && code[i] > first);
    }
    above && below
}

/// The size trend of every taxon (column of `counts`, rows as `effort`, `year`,
/// `site`, `season`): each taxon's own log-linear count model
/// `log mu = site + (season) + b·year + log effort` and its quasi-score test,
/// exactly the count-model size side of [`trend`] applied to the taxon's counts,
/// with the same year relabellings for every taxon (they depend only on the
/// number of years, `permutations` and `seed`). p-values are adjusted by
/// Benjamini–Hochberg (1995, J. R. Stat. Soc. B 57:289–300) across the taxa that
/// have one. A taxon whose slope has no finite estimate ([`slope_has_estimate`]:
/// all its organisms in one site's first or last year, say), or whose model
/// cannot be fitted, is kept with the reason and its yearly rates.
///
/// # Errors
/// [`AnalysisError::DimensionMismatch`]; [`AnalysisError::NonFinite`] or
/// [`AnalysisError::Negative`] for bad counts; [`AnalysisError::InvalidArgument`]
/// for effort that is not positive; [`AnalysisError::TooFewYears`] for fewer
/// than 3 years; the relabellings' errors.
pub fn taxon_trends(
    counts: &DMatrix<f64>,
    effort: &[f64],
    year: &[i32],
    site: &[usize],
    season: Option<&[usize]>,
    permutations: usize,
    seed: u64,
) -> Result<TaxonTrends, AnalysisError> {
    let (n, p) = counts.shape();
    super::count_model::check_taxon_counts(
        counts,
        effort,
        &[year.len(), site.len(), season.map_or(n, <[usize]>::len)],
    )?;
    let labels = YearLabels::new(year);
    let years = labels.years().to_vec();
    let k = years.len();
    if k < 3 {
        return Err(AnalysisError::TooFewYears { found: k, min: 3 });
    }
    let site = recode(site);
    let season = season.map(recode);
    let yearv: Vec<f64> = years.iter().map(|&y| f64::from(y - years[0])).collect();
    let (perms, exact) = year_permutations(k, permutations, seed)?;
    let vs: Vec<Vec<f64>> = perms
        .iter()
        .map(|perm| perm.iter().map(|&j| yearv[j]).collect())
        .collect();
    let mut taxa = Vec::new();
    for j in 0..p {
        let count: Vec<f64> = counts.column(j).iter().copied().collect();
        let individuals: f64 = count.iter().sum();
        if individuals <= 0.0 {
            continue;
        }
        let yearly_rates = pooled_rates(&count, effort, labels.codes(), k);
        let mut t = TaxonTrend {
            column: j,
            individuals,
            slope_log: None,
            pct_per_year: None,
            ci_low: None,
            ci_high: None,
            se_log: None,
            dispersion: None,
            p_value: None,
            p_adjusted: None,
            yearly_rates,
            not_estimated: None,
        };
        if !slope_has_estimate(&count, labels.codes(), &site) {
            t.not_estimated = Some(
                "no finite slope: at every site the taxon was caught only in its first or only \
                 in its last year"
                    .into(),
            );
            taxa.push(t);
            continue;
        }
        let data = CountData {
            count: &count,
            effort,
            year,
            season: season.as_deref(),
            site: &site,
        };
        let mut ignored = Vec::new();
        match SizeSide::rate(&data, labels.codes(), k, &yearv, &mut ignored) {
            Err(e) => t.not_estimated = Some(format!("the count model could not be fitted: {e}")),
            Ok(side) => {
                let observed = side.statistic(&yearv);
                let mut stats = Vec::with_capacity(vs.len());
                let mut slopes = Vec::with_capacity(vs.len());
                for v in &vs {
                    stats.push(side.statistic(v));
                    slopes.push(side.refitted_slope(v));
                }
                slopes.sort_by(f64::total_cmp);
                let (lo, hi) = (quantile(&slopes, 0.025), quantile(&slopes, 0.975));
                let (slope, se, dispersion, _) = side.estimate();
                t.slope_log = Some(slope);
                t.pct_per_year = Some(pct(slope));
                t.ci_low = Some(pct(slope - hi));
                t.ci_high = Some(pct(slope - lo));
                t.se_log = Some(se);
                t.dispersion = dispersion;
                t.p_value = Some(p_value(observed, &stats, exact));
            }
        }
        taxa.push(t);
    }
    let tested: Vec<usize> = (0..taxa.len())
        .filter(|&i| taxa[i].p_value.is_some())
        .collect();
    let ps: Vec<f64> = tested.iter().filter_map(|&i| taxa[i].p_value).collect();
    for (&i, q) in tested.iter().zip(benjamini_hochberg(&ps)) {
        taxa[i].p_adjusted = Some(q);
    }
    Ok(TaxonTrends {
        years,
        taxa,
        permutations: perms.len(),
        exact,
        smallest_possible_p: smallest_p(&yearv, perms.len(), exact),
    })
}

// ------------------------------------------------------------------ Student t

/// ln Γ(x) for x > 0 (Lanczos approximation, g = 7, 9 coefficients; relative
/// error below 1e-13 over the range used here).
fn ln_gamma(x: f64) -> f64 {
    // Coefficients of Godfrey's g = 7, n = 9 Lanczos series (common practice, no source).
    const C: [f64; 9] = [
        0.999_999_999_999_809_9,
        676.520_368_121_885_1,
        -1_259.139_216_722_402_8,
        771.323_428_777_653_1,
        -176.615_029_162_140_6,
        12.507_343_278_686_905,
        -0.138_571_095_265_720_12,
        9.984_369_578_019_572e-6,
        1.505_632_735_149_311_6e-7,
    ];
    if x < 0.5 {
        // Reflection: Γ(x)Γ(1−x) = π / sin(πx).
        return (std::f64::consts::PI / (std::f64::consts::PI * x).sin()).ln() - ln_gamma(1.0 - x);
    }
    let x = x - 1.0;
    let mut a = C[0];
    let t = x + 7.5;
    for (i, c) in C.iter().enumerate().skip(1) {
        a += c / (x + i as f64);
    }
    0.5 * (2.0 * std::f64::consts::PI).ln() + (x + 0.5) * t.ln() - t + a.ln()
}

/// Regularised incomplete beta I_x(a, b) by its continued fraction (modified
/// Lentz), using the symmetry `I_x(a,b) = 1 − I_{1−x}(b,a)` for convergence.
fn inc_beta(x: f64, a: f64, b: f64) -> f64 {
    if x <= 0.0 {
        return 0.0;
    }
    if x >= 1.0 {
        return 1.0;
    }
    if x > (a + 1.0) / (a + b + 2.0) {
        return 1.0 - inc_beta(1.0 - x, b, a);
    }
    let ln_front = ln_gamma(a + b) - ln_gamma(a) - ln_gamma(b) + a * x.ln() + b * (1.0 - x).ln();
    let tiny = 1e-300;
    let mut c = 1.0;
    let mut d = 1.0 - (a + b) * x / (a + 1.0);
    if d.abs() < tiny {
        d = tiny;
    }
    d = 1.0 / d;
    let mut h = d;
    for m in 1..500 {
        let m = f64::from(m);
        let num = m * (b - m) * x / ((a + 2.0 * m - 1.0) * (a + 2.0 * m));
        for step in [
            num,
            -(a + m) * (a + b + m) * x / ((a + 2.0 * m) * (a + 2.0 * m + 1.0)),
        ] {
            d = 1.0 + step * d;
            if d.abs() < tiny {
                d = tiny;
            }
            c = 1.0 + step / c;
            if c.abs() < tiny {
                c = tiny;
            }
            d = 1.0 / d;
            h *= d * c;
        }
        if (d * c - 1.0).abs() < 1e-16 {
            break;
        }
    }
    ln_front.exp() * h / a
}

/// Student t distribution function.
fn t_cdf(t: f64, df: f64) -> f64 {
    let tail = 0.5 * inc_beta(df / (df + t * t), df / 2.0, 0.5);
    if t >= 0.0 { 1.0 - tail } else { tail }
}

/// The `p` quantile of Student's t with `df` degrees of freedom (bisection on
/// the distribution function, written through the regularised incomplete beta).
///
/// # Errors
/// [`AnalysisError::InvalidArgument`] unless `0 < p < 1` and `df > 0`.
pub fn t_quantile(p: f64, df: f64) -> Result<f64, AnalysisError> {
    if prec::not_positive(p) || prec::not_positive(1.0 - p) || prec::not_positive(df) {
        return Err(AnalysisError::InvalidArgument {
            name: "t quantile",
            reason: format!("needs 0 < p < 1 and df > 0, got p = {p}, df = {df}"),
        });
    }
    if p < 0.5 {
        return Ok(-t_quantile(1.0 - p, df)?);
    }
    let mut hi = 1.0;
    while t_cdf(hi, df) < p {
        hi *= 2.0;
    }
    let mut lo = 0.0;
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if t_cdf(mid, df) < p {
            lo = mid;
        } else {
            hi = mid;
        }
        if hi - lo <= 1e-15 * hi {
            break;
        }
    }
    Ok(0.5 * (lo + hi))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::Distance;
    use crate::analysis::linear_model::{Design, Term, TermSpec, fit};
    use crate::analysis::permanova::PartialTerm;
    use proptest::prelude::*;
    use rand::rngs::ChaCha8Rng;
    use rand::{RngExt, SeedableRng};
    use serde_json::Value;

    const FIXTURE: &str = include_str!("../../tests/reference/trend.json");

    fn fixture() -> Value {
        serde_json::from_str(FIXTURE).expect("invariant: committed fixture is valid JSON")
    }

    fn opts(permutations: usize, seed: u64) -> TrendOptions {
        TrendOptions {
            baseline: Baseline::FirstYears(3),
            breakpoint: None,
            alpha: 0.05,
            min_samples: 3,
            permutations,
            seed,
        }
    }

    #[test]
    fn t_quantile_matches_scipy() {
        let fx = fixture();
        let rows = fx["t_quantiles"].as_array().unwrap();
        assert!(rows.len() >= 40);
        for r in rows {
            let (df, level) = (r["df"].as_f64().unwrap(), r["level"].as_f64().unwrap());
            // scipy.stats.t.ppf(level, df)
            let want = r["ppf"].as_f64().unwrap();
            let got = t_quantile(level, df).unwrap();
            assert!(
                (got - want).abs() <= 1e-9 * want.abs().max(1.0),
                "df {df} level {level}: {got} vs {want}"
            );
        }
        assert!(t_quantile(1.0, 3.0).is_err());
    }

    /// Trend inputs where every dissimilarity is the Euclidean distance of the
    /// log abundances (one column), so the shape test is the size test.
    fn univariate(y: &[f64]) -> DistanceMatrix {
        let m = DMatrix::from_column_slice(y.len(), 1, y);
        Distance::Euclidean.compute(&m).unwrap()
    }

    #[test]
    fn rate_slope_matches_statsmodels_poisson_glm_with_zero_catches() {
        // statsmodels GLM(Poisson, offset = log effort) of y on site + centred year,
        // tests/reference/count_model.json case site_year (zeros at the rare site).
        let fx: Value =
            serde_json::from_str(include_str!("../../tests/reference/count_model.json")).unwrap();
        let c = &fx["cases"]["site_year"];
        let floats = |v: &Value| -> Vec<f64> {
            v.as_array()
                .unwrap()
                .iter()
                .map(|x| x.as_f64().unwrap())
                .collect()
        };
        let y = floats(&c["y"]);
        let effort = floats(&c["effort"]);
        let site: Vec<usize> = floats(&c["codes"]).iter().map(|&v| v as usize).collect();
        let year: Vec<i32> = floats(&c["year"])
            .iter()
            .map(|&v| 2000 + v as i32)
            .collect();
        assert!(y.iter().filter(|&&v| v == 0.0).count() >= 2);
        let keep: Vec<usize> = (0..y.len()).filter(|&i| y[i] > 0.0).collect();
        let logs: Vec<f64> = keep.iter().map(|&i| (y[i] / effort[i]).ln()).collect();
        let d = univariate(&logs);
        let sy: Vec<i32> = keep.iter().map(|&i| year[i]).collect();
        let ss: Vec<usize> = keep.iter().map(|&i| site[i]).collect();
        let data = TrendData {
            log_abundance: &logs,
            shape: &d,
            combined: &d,
            year: &sy,
            season: None,
            site: &ss,
            counts: Some(CountData {
                count: &y,
                effort: &effort,
                year: &year,
                season: None,
                site: &site,
            }),
        };
        let r = trend(&data, &opts(99, 3)).unwrap();
        let params = floats(&c["params"]);
        let want = params[params.len() - 1];
        let s = &r.size_trend;
        assert_eq!(s.model, SizeModel::Rate);
        assert!(
            (s.slope_log - want).abs() < 1e-7,
            "{} vs {want}",
            s.slope_log
        );
        assert!((s.slope_pct_per_year - 100.0 * want.exp_m1()).abs() < 1e-5);
        // statsmodels fit(scale="X2") standard error of the year coefficient
        let bse = floats(&c["bse_x2"]);
        assert!((s.se_log - bse[bse.len() - 1]).abs() < 1e-7);
        assert_eq!(s.df_resid, c["df_resid"].as_u64().unwrap() as usize);
        // Every row counts, the empty ones included.
        assert_eq!(r.n, y.len());
        assert!(s.ci_low < s.slope_pct_per_year && s.slope_pct_per_year < s.ci_high);
        assert!(s.p_value >= r.smallest_possible_p);
        // A site that caught nothing at all is left out, with a note, and changes nothing.
        let mut y2 = y.clone();
        let mut effort2 = effort.clone();
        let mut year2 = year.clone();
        let mut site2 = site.clone();
        for (i, yr) in (2000..2010).enumerate() {
            y2.push(0.0);
            effort2.push(1.0 + i as f64 * 0.1);
            year2.push(yr);
            site2.push(9);
        }
        let data2 = TrendData {
            counts: Some(CountData {
                count: &y2,
                effort: &effort2,
                year: &year2,
                season: None,
                site: &site2,
            }),
            ..data
        };
        let r2 = trend(&data2, &opts(99, 3)).unwrap();
        assert!((r2.size_trend.slope_log - want).abs() < 1e-7);
        assert!(
            r2.notes
                .iter()
                .any(|n| n.contains("caught nothing in any period"))
        );
    }

    #[test]
    fn pooled_rate_interval_is_the_ratio_estimator() {
        // Worked by hand: y = (2, 0, 4), e = (1, 1, 2): r = 6/4 = 1.5,
        // residuals (0.5, −1.5, 1.0), Σd² = 3.5, var = 3 · 3.5 / (2 · 16).
        let (r, ci) = rate_interval(&[2.0, 0.0, 4.0], &[1.0, 1.0, 2.0]).unwrap();
        assert!((r - 1.5).abs() < 1e-15);
        let se = (3.0 * 3.5 / 32.0_f64).sqrt();
        let half = t_quantile(0.975, 2.0).unwrap() * se / 1.5;
        let (lo, hi) = ci.unwrap();
        assert!((lo - 1.5 * (-half).exp()).abs() < 1e-12);
        assert!((hi - 1.5 * half.exp()).abs() < 1e-12);
        assert_eq!(
            rate_interval(&[0.0, 0.0], &[1.0, 1.0]).unwrap(),
            (0.0, None)
        );
    }

    /// The `ols` panel of the fixture: y, year and site codes.
    fn ols_panel(o: &Value) -> (Vec<f64>, Vec<i32>, Vec<usize>) {
        let y: Vec<f64> = o["y"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_f64().unwrap())
            .collect();
        let year: Vec<i32> = o["year"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_i64().unwrap() as i32)
            .collect();
        let site_labels: Vec<String> = o["site"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_str().unwrap().to_string())
            .collect();
        let site = Grouping::from_labels(&site_labels).codes().to_vec();
        (y, year, site)
    }

    #[test]
    fn size_slope_matches_statsmodels_ols() {
        let fx = fixture();
        let o = &fx["ols"];
        let (y, year, site) = ols_panel(o);
        let d = univariate(&y);
        let data = TrendData {
            log_abundance: &y,
            shape: &d,
            combined: &d,
            year: &year,
            season: None,
            site: &site,
            counts: None,
        };
        let r = trend(&data, &opts(99, 1)).unwrap();
        // statsmodels OLS y ~ C(site) + year (make_trend_fixtures.py)
        let s = &r.size_trend;
        assert!((s.slope_log - o["slope"].as_f64().unwrap()).abs() < 1e-10);
        assert!((s.se_log - o["se"].as_f64().unwrap()).abs() < 1e-10);
        assert_eq!(s.df_resid as u64, o["df_resid"].as_u64().unwrap());
        // anova_lm(reduced, full) F of year given site
        let f = o["f_year_given_site"].as_f64().unwrap();
        assert!((s.pseudo_f - f).abs() < 1e-8 * f);
        // Same matrix for shape: same F.
        assert!((r.shape_trend.pseudo_f - f).abs() < 1e-8 * f);
    }

    #[test]
    fn the_log_trend_of_one_value_matches_statsmodels_ols_and_the_size_trend() {
        let fx = fixture();
        let o = &fx["ols"];
        let (y, year, site) = ols_panel(o);
        let values: Vec<f64> = y.iter().map(|v| v.exp()).collect();
        let t = log_trend(&values, &year, &site, None, 99, 1).unwrap();
        // statsmodels OLS y ~ C(site) + year and anova_lm F (make_trend_fixtures.py)
        assert!((t.slope_log - o["slope"].as_f64().unwrap()).abs() < 1e-10);
        let f = o["f_year_given_site"].as_f64().unwrap();
        assert!((t.pseudo_f - f).abs() < 1e-8 * f);
        assert_eq!(t.df_resid as u64, o["df_resid"].as_u64().unwrap());
        // The same rows through the whole trend give the same p and interval.
        let d = univariate(&y);
        let data = TrendData {
            log_abundance: &y,
            shape: &d,
            combined: &d,
            year: &year,
            season: None,
            site: &site,
            counts: None,
        };
        let r = trend(&data, &opts(99, 1)).unwrap();
        assert_eq!(t.p_value, r.size_trend.p_value);
        assert_eq!(
            (t.ci_low, t.ci_high),
            (r.size_trend.ci_low, r.size_trend.ci_high)
        );
        assert_eq!(t.smallest_possible_p, r.smallest_possible_p);
        let span = f64::from(t.years[t.years.len() - 1] - t.years[0]);
        assert!((t.change_pct - 100.0 * ((t.slope_log * span).exp() - 1.0)).abs() < 1e-9);
        assert!(log_trend(&[1.0, 0.0, 2.0], &[1, 2, 3], &[0, 0, 0], None, 9, 1).is_err());
    }

    fn random_data(
        seed: u64,
        sites: usize,
        years: usize,
        drop: f64,
    ) -> (Vec<usize>, Vec<i32>, DMatrix<f64>) {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let (mut site, mut year, mut rows) = (Vec::new(), Vec::new(), Vec::new());
        for s in 0..sites {
            for t in 0..years {
                if rng.random::<f64>() < drop {
                    continue;
                }
                site.push(s);
                year.push(2000 + t as i32);
                rows.extend((0..6).map(|_| rng.random_range(1..40) as f64));
            }
        }
        let n = site.len();
        (site, year, DMatrix::from_row_slice(n, 6, &rows))
    }

    #[test]
    fn observed_f_equals_the_linear_model_fit() {
        // The k × k reduction must give the db-RDA partial F of linear_model::fit.
        let (site, year, y) = random_data(3, 5, 7, 0.2);
        let n = site.len();
        let d = Distance::Hellinger.compute(&y).unwrap();
        let g = gower_centre(&d);
        let design = Design::new(
            n,
            vec![
                Term::new("site", TermSpec::Factor(Grouping::from_codes(&site))),
                Term::new(
                    "year",
                    TermSpec::Covariate(year.iter().map(|&v| f64::from(v)).collect()),
                ),
            ],
        )
        .unwrap();
        let red = design.basis(&[0]).unwrap();
        let full = design.basis(&[0, 1]).unwrap();
        let want = fit(&g, &red, &full).unwrap();
        let labels = YearLabels::new(&year);
        let model = YearModel::new(
            &g,
            &reduced_basis(&site, None).unwrap(),
            labels.codes(),
            labels.years().len(),
        )
        .unwrap();
        let v: Vec<f64> = labels.years().iter().map(|&y| f64::from(y)).collect();
        assert!((model.pseudo_f(&v) - want.pseudo_f).abs() < 1e-9 * want.pseudo_f);
        assert!((model.ss(&v).unwrap() / model.total() - want.r2_term).abs() < 1e-12);
    }

    #[test]
    fn balanced_year_relabelling_equals_freedman_lane_whole_blocks() {
        // In a complete site × year grid, relabelling years by π is the row
        // permutation that moves each site's year-π(c) row to year c: the
        // Freedman–Lane statistic (docs/methods.md, "Permutation schemes and p-values")
        // under synchronised blocks.
        let (site, year, y) = random_data(5, 4, 6, 0.0);
        let n = site.len();
        let d = Distance::BrayCurtis.compute(&y).unwrap();
        let g = gower_centre(&d);
        let labels = YearLabels::new(&year);
        let k = labels.years().len();
        let red = reduced_basis(&site, None).unwrap();
        let yearv: Vec<f64> = labels.years().iter().map(|&v| f64::from(v)).collect();
        let xcol = DMatrix::from_fn(n, 1, |i, _| yearv[labels.codes()[i]]);
        let full = red.extended(&xcol).unwrap();
        let model = YearModel::new(&g, &red, labels.codes(), k).unwrap();
        let term = PartialTerm::new(&g, &red, &full);
        let (perms, _) = year_permutations(k, 30, 9).unwrap();
        for perm in perms.iter().take(30) {
            let v: Vec<f64> = perm.iter().map(|&j| yearv[j]).collect();
            // row permutation: position (s, perm[c]) receives sample (s, c)
            let mut rowperm = vec![0; n];
            for i in 0..n {
                let target = (0..n)
                    .find(|&t| site[t] == site[i] && labels.codes()[t] == perm[labels.codes()[i]])
                    .unwrap();
                rowperm[target] = i;
            }
            let mut out = [0.0];
            term.f_batch(&rowperm, &mut out);
            assert!(
                (model.pseudo_f(&v) - out[0]).abs() < 1e-9 * out[0].abs().max(1.0),
                "{} vs {}",
                model.pseudo_f(&v),
                out[0]
            );
        }
    }

    #[test]
    fn centroid_distance_is_the_distance_between_mean_vectors() {
        // Gower (1966): for Euclidean D, G = Yc Yc', so the formula gives ‖ȳ_a − ȳ_b‖².
        let (_, _, y) = random_data(8, 3, 4, 0.0);
        let d = Distance::Euclidean.compute(&y).unwrap();
        let g = gower_centre(&d);
        let (a, b) = (vec![0, 2, 5], vec![1, 7, 8, 10]);
        let mean = |idx: &[usize]| -> DVector<f64> {
            let mut m = DVector::zeros(y.ncols());
            for &i in idx {
                m += y.row(i).transpose();
            }
            m / idx.len() as f64
        };
        let want = (mean(&a) - mean(&b)).norm_squared();
        assert!((centroid_distance_sq(&g, &a, &b) - want).abs() < 1e-9 * want);
    }

    #[test]
    fn small_periods_are_listed_without_summaries() {
        let (mut site, mut year, y) = random_data(2, 5, 6, 0.0);
        // keep only two samples of the last year
        let keep: Vec<usize> = (0..site.len())
            .filter(|&i| year[i] < 2005 || site[i] < 2)
            .collect();
        site = keep.iter().map(|&i| site[i]).collect();
        year = keep.iter().map(|&i| year[i]).collect();
        let y = DMatrix::from_fn(keep.len(), y.ncols(), |i, j| y[(keep[i], j)]);
        let logs: Vec<f64> = (0..y.nrows()).map(|i| y.row(i).sum().ln()).collect();
        let h = Distance::Hellinger.compute(&y).unwrap();
        let bc = Distance::BrayCurtis.compute(&y).unwrap();
        let data = TrendData {
            log_abundance: &logs,
            shape: &h,
            combined: &bc,
            year: &year,
            season: None,
            site: &site,
            counts: None,
        };
        let r = trend(&data, &opts(99, 4)).unwrap();
        assert_eq!(r.periods.len(), 6);
        let last = r.periods.last().unwrap();
        assert_eq!((last.year, last.n, last.too_few), (2005, 2, true));
        assert!(last.abundance.is_none() && last.size_part.is_none());
        assert!(r.periods[3].abundance.is_some());
        assert!(!r.notes.is_empty());
    }

    proptest! {
        #[test]
        fn year_relabelling_moves_years_whole_and_keeps_site_series(seed in 0u64..500, sites in 1usize..6, k in 2usize..8) {
            let mut rng = ChaCha8Rng::seed_from_u64(seed);
            let (mut site, mut year) = (Vec::new(), Vec::new());
            for s in 0..sites {
                for t in 0..k {
                    if rng.random::<f64>() < 0.3 { continue; }
                    site.push(s);
                    year.push(1990 + 2 * t as i32);
                }
            }
            prop_assume!(!site.is_empty());
            let labels = YearLabels::new(&year);
            let kk = labels.years().len();
            let (perms, _) = year_permutations(kk, 20, seed).unwrap();
            for perm in &perms {
                let new = labels.apply(perm);
                // every sample of one year gets one new year, and distinct years stay distinct
                for i in 0..year.len() {
                    for j in 0..year.len() {
                        prop_assert_eq!(year[i] == year[j], new[i] == new[j]);
                    }
                }
                // the new years are the old ones rearranged
                let mut a = labels.years().to_vec();
                let mut b = new.clone();
                b.sort_unstable(); b.dedup(); a.sort_unstable();
                prop_assert_eq!(a, b);
                // each site keeps its samples (positions, data, site code untouched);
                // only the year labels of its series are relabelled, injectively
                for s in 0..sites {
                    let mine: Vec<usize> = (0..site.len()).filter(|&i| site[i] == s).collect();
                    let mut ys: Vec<i32> = mine.iter().map(|&i| new[i]).collect();
                    let before = ys.len();
                    ys.sort_unstable(); ys.dedup();
                    prop_assert_eq!(ys.len(), before);
                }
            }
        }
    }

    #[test]
    fn few_years_are_enumerated_identity_first() {
        let (perms, exact) = year_permutations(4, 99, 1).unwrap();
        assert!(exact);
        assert_eq!(perms.len(), 24);
        assert_eq!(perms[0], vec![0, 1, 2, 3]);
        let (perms, exact) = year_permutations(8, 99, 1).unwrap();
        assert!(!exact);
        assert_eq!(perms.len(), 99);
    }

    // ---------------------------------------------------------- simulations

    fn normal(rng: &mut ChaCha8Rng) -> f64 {
        let u: f64 = 1.0 - rng.random::<f64>();
        let v: f64 = rng.random::<f64>();
        (-2.0 * u.ln()).sqrt() * (2.0 * std::f64::consts::PI * v).cos()
    }

    fn poisson(rng: &mut ChaCha8Rng, mean: f64) -> f64 {
        // Sequential inversion (fine for the means used here, below ~100).
        let u: f64 = rng.random::<f64>();
        let (mut k, mut p) = (0.0, (-mean).exp());
        let mut cum = p;
        while u > cum && k < 1000.0 {
            k += 1.0;
            p *= mean / k;
            cum += p;
        }
        k
    }

    /// Simulated monitoring counts with known truth: 8 sites × 12 years, 12 taxa;
    /// site effects on totals and composition, year shocks shared by every site
    /// (sd 0.06 on the total and per taxon), sample noise (sd 0.15), Poisson
    /// counts. `size_slope`: change of ln(total) per year; `shape_slope`: per
    /// year, the first half of the taxa gain and the second half lose this much
    /// on the log scale, with the expected total unchanged. `step`: a size step
    /// of that log size from year index 6 on (instead of a linear trend).
    fn simulate(
        seed: u64,
        size_slope: f64,
        shape_slope: f64,
        step: Option<f64>,
    ) -> (Vec<usize>, Vec<i32>, DMatrix<f64>) {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let (sites, years, p) = (8, 12, 12);
        let base: Vec<f64> = (0..p).map(|j| 0.8f64.powi(j as i32)).collect();
        let site_level: Vec<f64> = (0..sites).map(|_| 0.3 * normal(&mut rng)).collect();
        let site_taxon: Vec<Vec<f64>> = (0..sites)
            .map(|_| (0..p).map(|_| 0.3 * normal(&mut rng)).collect())
            .collect();
        let year_level: Vec<f64> = (0..years).map(|_| 0.06 * normal(&mut rng)).collect();
        let year_taxon: Vec<Vec<f64>> = (0..years)
            .map(|_| (0..p).map(|_| 0.06 * normal(&mut rng)).collect())
            .collect();
        let (mut site, mut year, mut rows) = (Vec::new(), Vec::new(), Vec::new());
        for s in 0..sites {
            for t in 0..years {
                let tc = t as f64 - 5.5;
                let mut w: Vec<f64> = (0..p)
                    .map(|j| {
                        let dir = if j < p / 2 { 1.0 } else { -1.0 };
                        base[j]
                            * (site_taxon[s][j] + year_taxon[t][j] + dir * shape_slope * tc).exp()
                    })
                    .collect();
                let sum: f64 = w.iter().sum();
                w.iter_mut().for_each(|x| *x /= sum);
                let log_size = match step {
                    Some(h) => {
                        if t >= 6 {
                            h
                        } else {
                            0.0
                        }
                    }
                    None => size_slope * tc,
                };
                let total = 300.0
                    * (site_level[s] + year_level[t] + log_size + 0.15 * normal(&mut rng)).exp();
                site.push(s);
                year.push(2001 + t as i32);
                for wj in &w {
                    rows.push(poisson(&mut rng, total * wj));
                }
            }
        }
        let n = site.len();
        (site, year, DMatrix::from_row_slice(n, p, &rows))
    }

    fn run_sim(
        seed: u64,
        size: f64,
        shape: f64,
        step: Option<f64>,
        bp: Option<BreakpointSpec>,
    ) -> TrendResult {
        let (site, year, y) = simulate(seed, size, shape, step);
        let logs: Vec<f64> = (0..y.nrows()).map(|i| y.row(i).sum().ln()).collect();
        let h = Distance::Hellinger.compute(&y).unwrap();
        let bc = Distance::BrayCurtis
            .compute_after(crate::analysis::Transform::Sqrt, &y)
            .unwrap();
        let data = TrendData {
            log_abundance: &logs,
            shape: &h,
            combined: &bc,
            year: &year,
            season: None,
            site: &site,
            counts: None,
        };
        let mut o = opts(199, seed + 1000);
        o.breakpoint = bp;
        trend(&data, &o).unwrap()
    }

    #[test]
    fn known_trends_are_diagnosed() {
        // Simulation with known truth, 20 seeds per story. With these effects the
        // tests have power near 1, so the diagnosis fails essentially only through
        // a false positive of the other aspect (rate ≤ alpha = 0.05): the number
        // right is then Binomial(20, ≥ 0.95), whose 0.001 quantile is 15
        // (scipy.stats.binom.ppf(0.001, 20, 0.95), tests/reference/trend.json).
        let fx = fixture();
        let q = fx["binomial"][0]["q001"].as_u64().unwrap() as usize;
        assert_eq!(q, 15);
        for (size, shape, want) in [
            (-0.05, 0.0, Diagnosis::Abundance),
            (0.0, 0.04, Diagnosis::Composition),
            (-0.05, 0.04, Diagnosis::Both),
        ] {
            let right = (0..20)
                .filter(|&s| run_sim(100 + s, size, shape, None, None).diagnosis == want)
                .count();
            assert!(right >= q.max(16), "{want:?}: right in {right} of 20 seeds");
        }
        // A stated trend is estimated: −5 % per year lies inside most intervals.
        let covered = (0..20)
            .filter(|&s| {
                let r = run_sim(200 + s, -0.05, 0.0, None, None);
                let want = 100.0 * ((-0.05f64).exp() - 1.0);
                r.size_trend.ci_low <= want && want <= r.size_trend.ci_high
            })
            .count();
        assert!(
            covered >= 15,
            "interval covered the true slope in {covered} of 20 seeds"
        );
    }

    #[test]
    fn no_trend_gives_false_positives_near_alpha() {
        // Under the null (year shocks exchangeable, no trend) each test rejects at
        // rate alpha = 0.05: over 200 seeds the count lies in [2, 21], the 0.001
        // and 0.999 quantiles of Binomial(200, 0.05); the diagnosis differs from
        // `none` at rate ≤ 1 − 0.95² = 0.0975, at most 34 of 200 (0.999 quantile of
        // Binomial(200, 0.0975)) (scipy.stats.binom.ppf, tests/reference/trend.json).
        let fx = fixture();
        let b = &fx["binomial"];
        let (lo, hi) = (
            b[1]["q001"].as_u64().unwrap() as usize,
            b[1]["q999"].as_u64().unwrap() as usize,
        );
        let hi_any = b[2]["q999"].as_u64().unwrap() as usize;
        let runs: Vec<TrendResult> = (0..200)
            .map(|s| run_sim(5000 + s, 0.0, 0.0, None, None))
            .collect();
        let size = runs.iter().filter(|r| r.size_trend.p_value <= 0.05).count();
        let shape = runs
            .iter()
            .filter(|r| r.shape_trend.p_value <= 0.05)
            .count();
        let wrong = runs
            .iter()
            .filter(|r| r.diagnosis != Diagnosis::None)
            .count();
        assert!((lo..=hi).contains(&size), "size rejections {size}");
        assert!((lo..=hi).contains(&shape), "shape rejections {shape}");
        assert!(wrong <= hi_any, "wrong diagnoses {wrong}");
        // The upper tail too (p-values uniform under the null, P(p > 0.95) ≈ 0.05).
        let size_hi = runs.iter().filter(|r| r.size_trend.p_value > 0.95).count();
        let shape_hi = runs.iter().filter(|r| r.shape_trend.p_value > 0.95).count();
        assert!((lo..=hi).contains(&size_hi), "size p > 0.95: {size_hi}");
        assert!((lo..=hi).contains(&shape_hi), "shape p > 0.95: {shape_hi}");
    }

    #[test]
    fn a_step_is_located_and_diagnosed() {
        // A size step of −0.4 (×0.67) from the 7th year (2007): the search finds it
        // within a year in most seeds, and the diagnosis (trend or breakpoint,
        // Bonferroni over the two) is `abundance`.
        let mut located = 0;
        let mut right = 0;
        for s in 0..20 {
            let r = run_sim(300 + s, 0.0, 0.0, Some(-0.4), Some(BreakpointSpec::Auto));
            let b = r.breakpoints.as_ref().unwrap();
            if (b.size.year - 2007).abs() <= 1 {
                located += 1;
            }
            if r.diagnosis == Diagnosis::Abundance {
                right += 1;
            }
            assert_eq!(b.size.candidates, 12 - 3);
        }
        assert!(located >= 16, "located in {located} of 20");
        assert!(right >= 16, "right in {right} of 20");
    }

    #[test]
    fn taxon_trends_equal_statsmodels_poisson_fits_per_taxon() {
        // statsmodels GLM (Poisson, log link, offset log effort, site effects),
        // slope SE scaled by the Pearson dispersion (fit(scale="X2")), and numpy
        // pooled yearly rates: tests/reference/taxon_trends.json.
        let fx: serde_json::Value =
            serde_json::from_str(include_str!("../../tests/reference/taxon_trends.json")).unwrap();
        let vec_f = |v: &serde_json::Value| -> Vec<f64> {
            v.as_array()
                .unwrap()
                .iter()
                .map(|x| x.as_f64().unwrap())
                .collect()
        };
        let site: Vec<usize> = vec_f(&fx["site"]).iter().map(|&v| v as usize).collect();
        let year: Vec<i32> = vec_f(&fx["year"]).iter().map(|&v| v as i32).collect();
        let effort = vec_f(&fx["effort"]);
        let rows: Vec<Vec<f64>> = fx["counts"].as_array().unwrap().iter().map(vec_f).collect();
        let counts = DMatrix::from_fn(rows.len(), rows[0].len(), |i, j| rows[i][j]);
        let out = taxon_trends(&counts, &effort, &year, &site, None, 99, 3).unwrap();
        assert_eq!(out.taxa.len(), counts.ncols());
        for (t, f) in out.taxa.iter().zip(fx["taxa"].as_array().unwrap()) {
            for (a, b) in t.yearly_rates.iter().zip(vec_f(&f["yearly_rates"])) {
                assert!((a - b).abs() < 1e-12 * b.abs().max(1.0), "{a} vs {b}");
            }
            if f["finite"].as_bool().unwrap() {
                let close = |a: f64, b: f64, tol: f64| assert!((a - b).abs() < tol, "{a} vs {b}");
                close(
                    t.slope_log.unwrap(),
                    f["slope_log_statsmodels"].as_f64().unwrap(),
                    1e-7,
                );
                close(
                    t.se_log.unwrap(),
                    f["se_log_statsmodels_x2"].as_f64().unwrap(),
                    1e-7,
                );
                close(
                    t.dispersion.unwrap(),
                    f["dispersion_statsmodels_x2"].as_f64().unwrap(),
                    1e-6,
                );
                let (lo, hi) = (t.ci_low.unwrap(), t.ci_high.unwrap());
                assert!(lo <= t.pct_per_year.unwrap() && t.pct_per_year.unwrap() <= hi);
                assert!(t.p_value.unwrap() >= out.smallest_possible_p);
                assert!(t.p_adjusted.unwrap() >= t.p_value.unwrap());
            } else {
                assert!(t.slope_log.is_none() && t.p_value.is_none());
                assert!(t.not_estimated.as_deref().unwrap().contains("first"));
            }
        }
        // The strong decline (taxon 0, simulated at −18 % a year) is clear.
        assert!(out.taxa[0].p_value.unwrap() <= 0.02);
    }

    #[test]
    fn a_slope_has_an_estimate_only_when_sites_bound_it_both_ways() {
        let code = [0, 1, 2, 0, 1, 2];
        let site = [0, 0, 0, 1, 1, 1];
        // All in the first year of every site: unbounded below.
        assert!(!slope_has_estimate(&[3., 0., 0., 2., 0., 0.], &code, &site));
        // One site in its first year only, another in its last only: bounded.
        assert!(slope_has_estimate(&[3., 0., 0., 0., 0., 2.], &code, &site));
        // A middle year bounds both ways.
        assert!(slope_has_estimate(&[0., 1., 0., 0., 0., 0.], &code, &site));
    }
}
