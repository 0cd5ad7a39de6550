//! The size-and-shape workflow in one analysis (`docs/methods.md`, "The
//! `compare` workflow"): (a) size: the permutation F test of log totals with
//! the ratio of geometric means to the reference group and its bootstrap
//! interval; (b) shape: PERMANOVA (Anderson 2001, Austral Ecology 26:32–46)
//! under a shape-only dissimilarity, with the dispersion test (Anderson 2006,
//! Biometrics 62:245–253) beside it, optionally after rarefying every sample
//! to the same number of individuals; (c) the combined dissimilarity with its
//! PERMANOVA and size/shape partition; (d) a plain-language verdict per group
//! against the reference and, with more than two groups, for every pair with
//! Holm (1979, Scand. J. Statist. 6:65–70) adjusted p-values.

use serde::{Deserialize, Serialize};

use crate::analysis::AnalysisError;
use crate::analysis::dispersion::{DispersionOptions, DispersionResult, Permute, dispersion};
use crate::analysis::dissimilarity::{Distance, DistanceMatrix};
use crate::analysis::linear_model::{Grouping, SsType};
use crate::analysis::partition::{Fractions, PartitionOptions, ShapeAxes, SizeCoding, partition};
use crate::analysis::permanova::{PermanovaOptions, PermanovaResult, permanova_oneway};
use crate::analysis::permutation::{Permuter, Scheme, holm};
use crate::analysis::rarefy::{mean_rarefied_distance, min_total};
use crate::analysis::size_test::{
    SizeModel, SizeTestOptions, SizeTestResult, rate_test, size_test,
};
use crate::analysis::taxa::{TaxonChange, contrast};
use crate::analysis::transform::Transform;
use crate::matrix::CountMatrix;
use crate::store::Selection;
// The verdict is part of the stored result, worded with the one p-value formatter.
use crate::report::format::fmt_p;

use super::design::{self, DistanceSpec, Periods, PermuteDesign, ShapeDistance, TermScheme};
use super::partition::{CAUTION, MIN_RESID_DF};
use super::permanova::GroupSize;
use super::{Analysis, Prepared, Progress, Result, WorkflowError};

/// The run kind.
pub const KIND: &str = "compare";

/// Bootstrap resamples of the ratio interval.
pub const BOOTSTRAP: usize = 999;

/// Rarefied draws averaged by default.
pub const RAREFY_REPS: usize = 10;

/// Significance level of the wording by default.
pub const ALPHA: f64 = 0.05;

/// Coverage of the ratio interval.
pub const CONFIDENCE: f64 = 0.95;

/// The combined dissimilarity by default: Bray-Curtis on square roots.
pub const COMBINED: DistanceSpec = DistanceSpec {
    distance: Distance::BrayCurtis,
    transform: Transform::Sqrt,
};

/// How many individuals every sample is subsampled to.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum RarefyDepth {
    /// The total of the smallest sample.
    Min,
    /// This many individuals (samples with fewer are left out of the shape analysis).
    Individuals(u64),
}

impl std::str::FromStr for RarefyDepth {
    type Err = String;

    /// `min` or a positive whole number.
    fn from_str(s: &str) -> std::result::Result<Self, String> {
        let t = s.trim();
        if t == "min" {
            return Ok(RarefyDepth::Min);
        }
        match t.parse::<u64>() {
            Ok(n) if n > 0 => Ok(RarefyDepth::Individuals(n)),
            _ => Err(format!(
                "expected a number of individuals or 'min', got '{s}'"
            )),
        }
    }
}

/// Parse `--rarefy` text (the command line's value parser).
///
/// # Errors
/// Text that is neither `min` nor a positive whole number.
pub fn parse_rarefy(s: &str) -> std::result::Result<RarefyDepth, String> {
    s.parse()
}

/// Rarefying before the shape analysis.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct Rarefy {
    /// The depth.
    pub depth: RarefyDepth,
    /// Rarefied draws whose dissimilarities are averaged.
    pub reps: usize,
}

/// What to compute.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Spec {
    /// The field whose values are the groups.
    pub by: String,
    /// Permute only within the levels of this field.
    pub strata: Option<String>,
    /// How rows are exchanged (runs stored before this choice existed were free).
    #[serde(default = "PermuteDesign::before_designs")]
    pub scheme: PermuteDesign,
    /// How size is summarised (runs stored before this choice existed used the
    /// geometric mean).
    #[serde(default = "geometric_before_rates")]
    pub size_model: SizeModel,
    /// The group the others are compared with (`None`: the first in sorted order).
    pub reference: Option<String>,
    /// Year ranges defining the field `period`, applied to the prepared matrix first.
    pub periods: Option<Periods>,
    /// Shape-only dissimilarity of the composition test.
    pub shape_distance: ShapeDistance,
    /// Rarefy before the shape analysis.
    pub rarefy: Option<Rarefy>,
    /// Significance level of the wording of the verdict.
    pub alpha: f64,
    /// The combined dissimilarity (size and shape together).
    pub combined: DistanceSpec,
    /// Random permutations per test.
    pub permutations: usize,
    /// Bootstrap resamples of the ratio interval.
    pub bootstrap: usize,
    /// Seed of the random streams.
    pub seed: u64,
}

/// The size model of runs stored before the rate model existed.
fn geometric_before_rates() -> SizeModel {
    SizeModel::Geometric
}

impl Spec {
    /// The selection this comparison runs on, from `base`: under the rate model
    /// rows that caught nothing are data for the size test, so they are kept (the
    /// shape tests leave them out with a note). The stored selection records this.
    pub fn selection(&self, base: &Selection) -> Selection {
        let mut s = base.clone();
        s.keep_empty |= self.size_model == SizeModel::Rate;
        s
    }

    /// The comparison by `by` with every other choice at its default.
    pub fn new(by: impl Into<String>, permutations: usize, seed: u64) -> Spec {
        Spec {
            by: by.into(),
            strata: None,
            scheme: PermuteDesign::Auto,
            size_model: SizeModel::Rate,
            reference: None,
            periods: None,
            shape_distance: ShapeDistance::default(),
            rarefy: None,
            alpha: ALPHA,
            combined: COMBINED,
            permutations,
            bootstrap: BOOTSTRAP,
            seed,
        }
    }
}

/// One group of the size test.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SizeGroup {
    /// Group name.
    pub name: String,
    /// Rows.
    pub n: usize,
    /// Geometric mean total (geometric model).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub geometric_mean_total: Option<f64>,
    /// Pooled rate Σ count ÷ Σ effort (rate model; Σ count ÷ rows without effort).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub pooled_rate: Option<f64>,
    /// Geometric mean relative to the reference group.
    pub ratio: f64,
    /// Lower bootstrap bound of the ratio.
    pub ci_low: f64,
    /// Upper bound.
    pub ci_high: f64,
}

/// (a) The size test over all groups.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Size {
    /// Ratio of the two groups (two groups only).
    pub ratio: Option<f64>,
    /// Its lower bound (two groups only).
    pub ci_low: Option<f64>,
    /// Its upper bound (two groups only).
    pub ci_high: Option<f64>,
    /// Permutation p-value of the one-way F.
    pub p_value: f64,
    /// How size was summarised and tested.
    pub model: SizeModel,
    /// One-way F on log totals (geometric) or quasi-Poisson deviance F (rate).
    pub f: f64,
    /// Degrees of freedom.
    pub df: (usize, usize),
    /// Interval coverage.
    pub confidence: f64,
    /// Bootstrap resamples.
    pub bootstrap: usize,
    /// What the bootstrap resampled: whole sites within groups, whole sites, or
    /// samples within groups.
    pub resampled: &'static str,
    /// Permutations evaluated.
    pub permutations: usize,
    /// Exactly enumerated.
    pub exact: bool,
    /// Smallest p-value this design can give.
    pub smallest_possible_p: f64,
    /// Per group.
    pub groups: Vec<SizeGroup>,
}

/// One group of the dispersion test.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct DispersionGroup {
    /// Group name.
    pub name: String,
    /// Rows.
    pub n: usize,
    /// Mean distance to the group centroid.
    pub mean_distance_to_centroid: f64,
}

/// How the shape dissimilarity was rarefied.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Rarefied {
    /// Individuals per sample.
    pub depth: u64,
    /// Draws averaged.
    pub reps: usize,
    /// Labels of the samples left out (fewer individuals than `depth`).
    pub dropped: Vec<String>,
}

/// (b) The shape tests over all groups.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Shape {
    /// The shape-only dissimilarity.
    pub distance: Distance,
    /// PERMANOVA pseudo-F.
    pub pseudo_f: f64,
    /// PERMANOVA R².
    pub r2: f64,
    /// PERMANOVA p-value.
    pub p_value: f64,
    /// PERMANOVA permutations evaluated.
    pub permutations: usize,
    /// PERMANOVA exactly enumerated.
    pub exact: bool,
    /// Smallest p-value the PERMANOVA can give.
    pub smallest_possible_p: f64,
    /// Dispersion F.
    pub dispersion_f: f64,
    /// Dispersion p-value.
    pub dispersion_p_value: f64,
    /// Dispersion permutations evaluated.
    pub dispersion_permutations: usize,
    /// Per group.
    pub dispersion_groups: Vec<DispersionGroup>,
    /// Rarefying, if any.
    pub rarefied: Option<Rarefied>,
}

/// P-values of the partition's unique parts.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct PartitionP {
    /// Size given shape.
    pub size_only: Option<f64>,
    /// Shape given size.
    pub shape_only: Option<f64>,
}

/// (c) The combined dissimilarity.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Combined {
    /// The dissimilarity.
    pub distance: Distance,
    /// The transform applied before it.
    pub transform: Transform,
    /// PERMANOVA pseudo-F.
    pub pseudo_f: f64,
    /// PERMANOVA R².
    pub r2: f64,
    /// PERMANOVA p-value.
    pub p_value: f64,
    /// PERMANOVA permutations evaluated.
    pub permutations: usize,
    /// Raw fractions of the partition (`None` when it could not be computed).
    pub fractions: Option<Fractions>,
    /// Adjusted fractions.
    pub adjusted_fractions: Option<Fractions>,
    /// P-values of the unique parts.
    pub partition_p_values: Option<PartitionP>,
    /// Dimensions of the shape design.
    pub shape_axes: Option<usize>,
}

/// Rows of the two groups of a comparison.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub struct PairN {
    /// Rows of the group.
    pub group: usize,
    /// Rows of the reference.
    pub reference: usize,
}

/// The size part of one comparison.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PairSize {
    /// Geometric mean of the group over the reference's.
    pub ratio: f64,
    /// Lower bootstrap bound.
    pub ci_low: f64,
    /// Upper bound.
    pub ci_high: f64,
    /// Permutation p-value.
    pub p_value: f64,
    /// Holm-adjusted p-value (more than two groups).
    pub p_adjusted: Option<f64>,
    /// Permutations evaluated.
    pub permutations: usize,
}

/// The shape part of one comparison.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PairShape {
    /// The shape-only dissimilarity.
    pub distance: Distance,
    /// PERMANOVA pseudo-F.
    pub pseudo_f: f64,
    /// PERMANOVA p-value.
    pub p_value: f64,
    /// Holm-adjusted.
    pub p_adjusted: Option<f64>,
    /// PERMANOVA permutations evaluated.
    pub permutations: usize,
    /// Dispersion p-value.
    pub dispersion_p_value: f64,
    /// Holm-adjusted.
    pub dispersion_p_adjusted: Option<f64>,
    /// Dispersion permutations evaluated.
    pub dispersion_permutations: usize,
}

/// (d) One group against its reference.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Comparison {
    /// The group.
    pub group: String,
    /// The group it is compared with.
    pub reference: String,
    /// Rows of both.
    pub n: PairN,
    /// Size.
    pub size: PairSize,
    /// Shape and dispersion.
    pub shape: PairShape,
    /// The (adjusted) size p-value is at most alpha.
    pub abundance_differs: bool,
    /// The (adjusted) composition p-value is at most alpha.
    pub composition_differs: bool,
    /// The (adjusted) dispersion p-value is at most alpha.
    pub dispersion_differs: bool,
    /// The verdict in words.
    pub verdict: String,
    /// The taxa behind the contrast, in column order (taxa absent from both groups
    /// left out): docs/methods.md, "Taxa behind the change".
    pub taxa: Vec<Taxon>,
}

/// One taxon of a comparison.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Taxon {
    /// Accepted name at the analysed rank.
    pub taxon: String,
    /// Its rates, ratio, shares, contributions and test.
    #[serde(flatten)]
    pub change: TaxonChange,
}

/// At most this many taxa are named in a verdict.
const NAMED_TAXA: usize = 2;

/// The taxa that carry a composition difference, in words: the largest shares
/// of the shift among taxa whose own change is clear (BH-adjusted p at most
/// `alpha`), e.g. ", mostly through a rise of Baetis (48 % of the shift)". Each
/// taxon is `(name, shape_contribution, share_change_pp, p_adjusted)`; `rise`
/// and `fall` are of the taxon's share. One wording for every contrast
/// (`compare`, `impact`).
pub fn drivers_in_words<'a>(
    taxa: impl IntoIterator<Item = (&'a str, Option<f64>, f64, Option<f64>)>,
    alpha: f64,
) -> String {
    let mut clear: Vec<(&str, f64, f64)> = taxa
        .into_iter()
        .filter(|t| t.3.is_some_and(|p| p <= alpha))
        .filter_map(|t| t.1.map(|c| (t.0, c, t.2)))
        .collect();
    clear.sort_by(|a, b| b.1.total_cmp(&a.1));
    if clear.is_empty() {
        return ", though no single taxon's own change is clear".to_string();
    }
    let named: Vec<String> = clear
        .iter()
        .take(NAMED_TAXA)
        .map(|(name, c, pp)| {
            format!(
                "a {} of {name} ({:.0} % of the shift)",
                if *pp >= 0.0 { "rise" } else { "fall" },
                100.0 * c
            )
        })
        .collect();
    format!(", mostly through {}", named.join(" and "))
}

impl Comparison {
    /// The taxa that carry the composition difference in words ([`drivers_in_words`]).
    fn drivers(&self, alpha: f64) -> String {
        drivers_in_words(
            self.taxa.iter().map(|t| {
                (
                    t.taxon.as_str(),
                    t.change.shape_contribution,
                    t.change.share_change_pp,
                    t.change.p_adjusted,
                )
            }),
            alpha,
        )
    }

    /// Whether the p-values are Holm-adjusted.
    pub fn adjusted(&self) -> bool {
        self.size.p_adjusted.is_some()
    }

    /// The p-values the verdict reads: (size, composition, dispersion).
    fn effective(&self) -> (f64, f64, f64) {
        (
            self.size.p_adjusted.unwrap_or(self.size.p_value),
            self.shape.p_adjusted.unwrap_or(self.shape.p_value),
            self.shape
                .dispersion_p_adjusted
                .unwrap_or(self.shape.dispersion_p_value),
        )
    }

    /// Set the verdict booleans and words at level `alpha`.
    fn word(&mut self, alpha: f64) {
        let (ps, pc, pd) = self.effective();
        let label = if self.adjusted() {
            "Holm-adjusted p"
        } else {
            "p"
        };
        let (ab, co, di) = (ps <= alpha, pc <= alpha, pd <= alpha);
        let size_word = if !ab {
            "abundance not different"
        } else if self.size.ratio < 1.0 {
            "abundance lower"
        } else {
            "abundance higher"
        };
        let mut text = format!(
            "{} against {}: {size_word} (×{:.2}, 95% CI {:.2}–{:.2}, {label} = {}); composition {} ({label} = {})",
            self.group,
            self.reference,
            self.size.ratio,
            self.size.ci_low,
            self.size.ci_high,
            fmt_p(ps, self.size.permutations),
            if co { "different" } else { "not different" },
            fmt_p(pc, self.shape.permutations),
        );
        if co && !self.taxa.is_empty() {
            text.push_str(&self.drivers(alpha));
        }
        if di {
            text.push_str(&format!(
                "; the spread of composition differs too (dispersion {label} = {}), so a composition \
                 difference may be one of spread rather than of average composition",
                fmt_p(pd, self.shape.dispersion_permutations)
            ));
        }
        self.abundance_differs = ab;
        self.composition_differs = co;
        self.dispersion_differs = di;
        self.verdict = text;
    }
}

/// The verdict booleans of a two-group comparison, also given at the top level.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub struct Differs {
    /// See [`Comparison::abundance_differs`].
    pub abundance_differs: bool,
    /// See [`Comparison::composition_differs`].
    pub composition_differs: bool,
    /// See [`Comparison::dispersion_differs`].
    pub dispersion_differs: bool,
}

/// What was computed.
#[derive(Debug, Clone, Serialize)]
pub struct Outcome {
    /// The grouping field.
    pub by: String,
    /// The reference group.
    pub reference: String,
    /// The groups.
    pub groups: Vec<GroupSize>,
    /// Significance level of the wording.
    pub alpha: f64,
    /// The totals are per unit effort.
    pub per_effort: bool,
    /// (a) Size.
    pub size: Size,
    /// (b) Shape (boxed, as (c), to keep [`super::AnalysisOutcome`] small).
    pub shape: Box<Shape>,
    /// (c) Combined.
    pub combined: Box<Combined>,
    /// (d) Every comparison.
    pub comparisons: Vec<Comparison>,
    /// The verdicts, one line per comparison.
    pub verdict: String,
    /// Seed used.
    pub seed: u64,
    /// Exchangeability scheme, described.
    pub scheme: String,
    /// The scheme the factor was tested under, and why.
    pub design: Vec<TermScheme>,
    /// Random permutations per test.
    pub permutations: usize,
    /// Notes for the user: the assembly's, then the analysis's own.
    pub notes: Vec<String>,
    /// The caution on spread and location.
    pub caution: &'static str,
    /// With two groups, the verdict booleans of the one comparison.
    #[serde(flatten)]
    pub differs: Option<Differs>,
    /// How many of `notes` came from the assembly.
    #[serde(skip)]
    pub assembly_notes: usize,
    /// How many taxa the table shows per comparison (`--taxa`; every taxon is in
    /// JSON and CSV).
    #[serde(skip)]
    pub taxa_shown: usize,
}

/// Taxa shown per comparison in the table unless `--taxa` says otherwise.
pub const TAXA_SHOWN: usize = 10;

impl Outcome {
    /// The notes of the analysis itself (the assembly's left out).
    pub fn own_notes(&self) -> &[String] {
        &self.notes[self.assembly_notes.min(self.notes.len())..]
    }
}

/// A kernel error on the rows `rows` of `m`, with row numbers of the subset
/// mapped back to the matrix.
fn kernel_on(what: String, e: AnalysisError, m: &CountMatrix, rows: &[usize]) -> WorkflowError {
    let e = match e {
        AnalysisError::EmptySamples { rows: r } => AnalysisError::EmptySamples {
            rows: r
                .into_iter()
                .map(|k| rows.get(k).copied().unwrap_or(k))
                .collect(),
        },
        other => other,
    };
    WorkflowError::kernel(what, e, m)
}

/// The shape dissimilarity with the matrix row of each of its samples.
struct ShapeD {
    d: DistanceMatrix,
    rows: Vec<usize>,
}

struct Tests {
    size: SizeTestResult,
    shape: PermanovaResult,
    disp: DispersionResult,
}

/// What every test of one run shares.
struct Ctx<'a> {
    m: &'a CountMatrix,
    totals: Vec<f64>,
    /// Sample totals as counts (per-effort totals times effort) and their effort (1
    /// without `--per-effort`), for the rate model.
    counts: Vec<f64>,
    effort: Vec<f64>,
    /// The site of every row when sites repeat (the bootstrap resamples sites).
    clusters: Option<Vec<usize>>,
    labels: Vec<String>,
    shape: ShapeD,
    scheme: Scheme,
    spec: &'a Spec,
    /// The matrix holds values per unit effort.
    per_effort: bool,
}

impl Ctx<'_> {
    /// The taxa behind `group` against the other group on the matrix rows
    /// `rows`, each taxon's rate tested under the comparison's scheme and seed.
    fn taxa(&self, group: &str, rows: &[usize], what: &str) -> Result<Vec<Taxon>> {
        let side: Vec<usize> = rows
            .iter()
            .map(|&i| usize::from(self.labels[i] == group))
            .collect();
        let opts = SizeTestOptions {
            permutations: self.spec.permutations,
            seed: self.spec.seed,
            scheme: self.scheme.subset(rows),
            bootstrap: 0,
            reference: 0,
            confidence: CONFIDENCE,
            clusters: self
                .clusters
                .as_ref()
                .map(|c| rows.iter().map(|&i| c[i]).collect()),
        };
        taxa_of(self.m, self.per_effort, rows, &side, &opts)
            .map_err(|e| kernel_on(format!("{what}per-taxon tests"), e, self.m, rows))
    }

    /// Size, shape and dispersion tests of the matrix rows `rows` against `reference`.
    fn tests(&self, reference: &str, rows: &[usize], what: &str) -> Result<Tests> {
        let p = self.spec;
        let sub_labels: Vec<&str> = rows.iter().map(|&i| self.labels[i].as_str()).collect();
        let g = Grouping::from_labels(&sub_labels);
        let reference_code = g
            .levels()
            .iter()
            .position(|l| l == reference)
            .expect("invariant: the reference is one of the groups compared");
        let t: Vec<f64> = rows.iter().map(|&i| self.totals[i]).collect();
        let sopts = SizeTestOptions {
            permutations: p.permutations,
            seed: p.seed,
            scheme: self.scheme.subset(rows),
            bootstrap: p.bootstrap,
            reference: reference_code,
            confidence: CONFIDENCE,
            clusters: self
                .clusters
                .as_ref()
                .map(|c| rows.iter().map(|&i| c[i]).collect()),
        };
        let size = match p.size_model {
            SizeModel::Geometric => size_test(&t, &g, &sopts, None),
            SizeModel::Rate => {
                let (y, e): (Vec<f64>, Vec<f64>) = rows
                    .iter()
                    .map(|&i| (self.counts[i], self.effort[i]))
                    .unzip();
                rate_test(&y, &e, &g, &sopts, None)
            }
        }
        .map_err(|e| kernel_on(format!("{what}size test"), e, self.m, rows))?;
        // shape.rows[k] is the matrix row of the shape dissimilarity's k-th sample.
        let sk: Vec<usize> = (0..self.shape.rows.len())
            .filter(|&k| rows.contains(&self.shape.rows[k]))
            .collect();
        let sd = self.shape.d.subset(&sk);
        let srows: Vec<usize> = sk.iter().map(|&k| self.shape.rows[k]).collect();
        let sl: Vec<&str> = srows.iter().map(|&i| self.labels[i].as_str()).collect();
        let sg = Grouping::from_labels(&sl);
        if sg.n_groups() != g.n_groups() {
            return Err(WorkflowError::Refused(format!(
                "{what}after rarefying, a group has no samples left: rarefy to fewer individuals"
            )));
        }
        let sscheme = self.scheme.subset(&srows);
        let shape = permanova_oneway(
            &sd,
            &sg,
            &PermanovaOptions {
                permutations: p.permutations,
                seed: p.seed,
                scheme: sscheme.clone(),
                ss_type: SsType::Sequential,
            },
            None,
        )
        .map_err(|e| {
            kernel_on(
                format!("{what}composition test (PERMANOVA)"),
                e,
                self.m,
                &srows,
            )
        })?;
        let disp = dispersion(
            &sd,
            &sg,
            &DispersionOptions {
                permutations: p.permutations,
                seed: p.seed,
                scheme: sscheme,
                permute: Permute::Residuals,
            },
            None,
        )
        .map_err(|e| kernel_on(format!("{what}dispersion test"), e, self.m, &srows))?;
        Ok(Tests { size, shape, disp })
    }
}

/// The taxa behind a two-sided contrast of the rows `rows` of `m` (`side` 0 the
/// reference, 1 the group): counts (per-effort values times effort, with
/// `per_effort`) with their effort, each taxon tested by `opts` (its scheme on
/// these rows): docs/methods.md, "Taxa behind the change".
///
/// # Errors
/// The kernel's, on these rows.
pub fn taxa_of(
    m: &CountMatrix,
    per_effort: bool,
    rows: &[usize],
    side: &[usize],
    opts: &SizeTestOptions,
) -> std::result::Result<Vec<Taxon>, AnalysisError> {
    let (y, effort) = super::design::taxon_counts(m, per_effort, rows);
    let c = contrast(&y, &effort, side, Some(opts))?;
    Ok(c.taxa
        .into_iter()
        .map(|t| Taxon {
            taxon: m.taxa[t.column].name.clone(),
            change: t,
        })
        .collect())
}

/// The comparison of `group` with `reference` in the tests `t` (unadjusted, unworded).
fn comparison_of(t: &Tests, group: &str, reference: &str, distance: Distance) -> Comparison {
    let find = |name: &str| t.size.groups.iter().find(|g| g.name == name);
    let (gm, rm) = (find(group), find(reference));
    Comparison {
        group: group.to_string(),
        reference: reference.to_string(),
        n: PairN {
            group: gm.map_or(0, |g| g.n),
            reference: rm.map_or(0, |g| g.n),
        },
        size: PairSize {
            ratio: gm.map_or(f64::NAN, |g| g.ratio),
            ci_low: gm.map_or(f64::NAN, |g| g.ratio_low),
            ci_high: gm.map_or(f64::NAN, |g| g.ratio_high),
            p_value: t.size.p_value,
            p_adjusted: None,
            permutations: t.size.permutations,
        },
        shape: PairShape {
            distance,
            pseudo_f: t.shape.terms[0].pseudo_f,
            p_value: t.shape.terms[0].p_value,
            p_adjusted: None,
            permutations: t.shape.terms[0].permutations,
            dispersion_p_value: t.disp.p_value,
            dispersion_p_adjusted: None,
            dispersion_permutations: t.disp.permutations,
        },
        abundance_differs: false,
        composition_differs: false,
        dispersion_differs: false,
        verdict: String::new(),
        taxa: Vec::new(),
    }
}

impl Spec {
    /// The shape dissimilarity of `m`, rarefied if asked (with the note on dropped rows).
    fn shape_distances(
        &self,
        m: &CountMatrix,
        per_effort: bool,
        totals: &[f64],
        notes: &mut Vec<String>,
    ) -> Result<(ShapeD, Option<Rarefied>)> {
        let n = m.values.nrows();
        let distance = self.shape_distance.distance();
        let Some(r) = self.rarefy else {
            // A sample that caught nothing has no composition: it counts in the size
            // test and is left out of the shape tests, with a note.
            let keep: Vec<usize> = (0..n).filter(|&i| totals[i] > 0.0).collect();
            if keep.len() < n {
                let empty: Vec<String> = (0..n)
                    .filter(|&i| totals[i] <= 0.0)
                    .map(|i| m.samples[i].label.clone())
                    .collect();
                notes.push(format!(
                    "{} caught nothing: they count in the size test and are left out of \
                     the composition and dispersion tests, which need a composition ({}{})",
                    crate::words::count(empty.len(), "row", "rows"),
                    empty.iter().take(5).cloned().collect::<Vec<_>>().join(", "),
                    if empty.len() > 5 { ", …" } else { "" }
                ));
            }
            let sub = m.select_rows(&keep);
            let d = DistanceSpec {
                distance,
                transform: Transform::None,
            }
            .compute(&sub)?;
            return Ok((ShapeD { d, rows: keep }, None));
        };
        if per_effort {
            return Err(WorkflowError::Refused(
                "--rarefy subsamples individuals, so it needs whole counts, but the selection has \
                 --per-effort (counts per unit effort). Rarefy the raw counts instead (drop --per-effort): \
                 rarefying itself puts every sample on the same number of individuals"
                    .into(),
            ));
        }
        let depth = match r.depth {
            RarefyDepth::Min => {
                min_total(&m.values).map_err(|e| WorkflowError::kernel("--rarefy min", e, m))?
            }
            RarefyDepth::Individuals(k) => k,
        };
        let keep: Vec<usize> = (0..n).filter(|&i| totals[i] >= depth as f64).collect();
        let dropped: Vec<String> = (0..n)
            .filter(|i| !keep.contains(i))
            .map(|i| m.samples[i].label.clone())
            .collect();
        if !dropped.is_empty() {
            notes.push(format!(
                "rarefying to {depth} individuals: {} with fewer dropped from the shape analysis ({}{})",
                crate::words::count(dropped.len(), "sample", "samples"),
                dropped.iter().take(5).cloned().collect::<Vec<_>>().join(", "),
                if dropped.len() > 5 { ", …" } else { "" }
            ));
        }
        if keep.len() < 3 {
            return Err(WorkflowError::Refused(format!(
                "rarefying to {depth} individuals leaves {}: rarefy to fewer",
                crate::words::count(keep.len(), "sample", "samples")
            )));
        }
        let sub = m.values.select_rows(keep.iter());
        let d = mean_rarefied_distance(&sub, depth, r.reps, self.seed, distance, Transform::None)
            .map_err(|e| kernel_on(format!("rarefying to {depth} individuals"), e, m, &keep))?;
        Ok((
            ShapeD { d, rows: keep },
            Some(Rarefied {
                depth,
                reps: r.reps,
                dropped,
            }),
        ))
    }
}

impl Analysis for Spec {
    const KIND: &'static str = KIND;
    type Outcome = Outcome;

    fn seed(&self) -> Option<u64> {
        Some(self.seed)
    }

    fn run(&self, prepared: &Prepared, progress: &dyn Progress) -> Result<Outcome> {
        design::check_alpha(self.alpha)?;
        let mut notes = prepared.notes.clone();
        let with_periods;
        let m = match &self.periods {
            Some(p) => {
                with_periods = p.apply(&prepared.matrix)?;
                notes.extend(
                    with_periods
                        .notes
                        .iter()
                        .skip(prepared.matrix.notes.len())
                        .cloned(),
                );
                &with_periods
            }
            None => &prepared.matrix,
        };
        let groups = design::grouping(m, &self.by, "--by")?;
        let levels = groups.levels().to_vec();
        if levels.len() < 2 {
            return Err(WorkflowError::Refused(format!(
                "--by {} has a single value ({}) in this selection: there is nothing to compare",
                self.by,
                levels.first().map(String::as_str).unwrap_or("none")
            )));
        }
        let reference = match &self.reference {
            Some(r) if !levels.contains(r) => {
                return Err(WorkflowError::Refused(format!(
                    "--reference {r} is not a value of {} here (values: {})",
                    self.by,
                    levels.join(", ")
                )));
            }
            Some(r) => r.clone(),
            None => levels[0].clone(),
        };
        let chosen = design::term_scheme(
            m,
            self.scheme,
            self.strata.as_deref(),
            &self.by,
            groups.codes(),
        )?;
        let scheme = chosen.scheme.clone();
        let chosen_permute = chosen.permute;
        let n = m.values.nrows();
        let totals = m.totals();
        let labels: Vec<String> = groups.codes().iter().map(|&c| levels[c].clone()).collect();
        let per_effort = prepared.selection.per_effort;
        progress.stage("compare");

        // (b) The shape dissimilarity, after rarefying if asked.
        let (shape, rarefied) = self.shape_distances(m, per_effort, &totals, &mut notes)?;
        let (counts, effort) = design::counts_and_effort(m, per_effort);
        let clusters = matches!(chosen.permute, "whole-sites" | "within-sites")
            .then(|| design::site_codes(m).0);
        let ctx = Ctx {
            m,
            totals,
            counts,
            effort,
            clusters,
            labels,
            shape,
            scheme,
            spec: self,
            per_effort,
        };

        // (a), (b): global tests over all groups.
        let all: Vec<usize> = (0..n).collect();
        let global = ctx.tests(&reference, &all, "")?;
        progress.update(1, 3);

        // (c) The combined dissimilarity with its PERMANOVA and partition.
        // Rows that caught nothing have no place in a dissimilarity of compositions.
        let filled: Vec<usize> = (0..n).filter(|&i| ctx.totals[i] > 0.0).collect();
        let comb_m = m.select_rows(&filled);
        let comb_groups = groups.subset(&filled);
        let comb_scheme = ctx.scheme.subset(&filled);
        let comb_d = self.combined.compute(&comb_m)?;
        let comb = permanova_oneway(
            &comb_d,
            &comb_groups,
            &PermanovaOptions {
                permutations: self.permutations,
                seed: self.seed,
                scheme: comb_scheme.clone(),
                ss_type: SsType::Sequential,
            },
            None,
        )
        .map_err(|e| WorkflowError::kernel("PERMANOVA of the combined dissimilarity", e, m))?;
        let relabels = Permuter::new(filled.len(), &comb_scheme, None).is_ok_and(|p| p.relabels());
        let part = if relabels {
            notes.push(
                "no size/shape partition of the combined dissimilarity: its tests permute rows, \
                 and whole sites can move as rows only when every site gives the same number of \
                 rows (select the same years at every site to get it)"
                    .to_string(),
            );
            None
        } else {
            match partition(
                &comb_m.values,
                &comb_d,
                &PartitionOptions {
                    size: SizeCoding::LogTotal,
                    shape_axes: ShapeAxes::Auto {
                        min_resid_df: MIN_RESID_DF,
                    },
                    permutations: self.permutations,
                    seed: self.seed,
                    scheme: comb_scheme.clone(),
                },
                None,
            ) {
                Ok(r) => Some(r),
                Err(e) => {
                    notes.push(format!(
                        "no size/shape partition of the combined dissimilarity: {e}"
                    ));
                    None
                }
            }
        };
        progress.update(2, 3);

        // (d) Comparisons.
        let shape_distance = self.shape_distance.distance();
        let two = levels.len() == 2;
        let mut comparisons: Vec<Comparison> = Vec::new();
        if two {
            let other = levels
                .iter()
                .find(|l| **l != reference)
                .expect("invariant: two levels");
            let mut c = comparison_of(&global, other, &reference, shape_distance);
            c.taxa = ctx.taxa(other, &all, "")?;
            comparisons.push(c);
        } else {
            let mut pairs: Vec<(String, String)> = levels
                .iter()
                .filter(|l| **l != reference)
                .map(|l| (l.clone(), reference.clone()))
                .collect();
            for (x, a) in levels.iter().enumerate() {
                for b in levels.iter().skip(x + 1) {
                    if *a != reference && *b != reference {
                        pairs.push((b.clone(), a.clone()));
                    }
                }
            }
            for (g, r) in &pairs {
                let rows: Vec<usize> = (0..n)
                    .filter(|&i| ctx.labels[i] == *g || ctx.labels[i] == *r)
                    .collect();
                let what = format!("comparing {g} with {r}: ");
                let t = ctx.tests(r, &rows, &what)?;
                let mut c = comparison_of(&t, g, r, shape_distance);
                c.taxa = ctx.taxa(g, &rows, &what)?;
                comparisons.push(c);
            }
            let hs = holm(
                &comparisons
                    .iter()
                    .map(|c| c.size.p_value)
                    .collect::<Vec<_>>(),
            );
            let hc = holm(
                &comparisons
                    .iter()
                    .map(|c| c.shape.p_value)
                    .collect::<Vec<_>>(),
            );
            let hd = holm(
                &comparisons
                    .iter()
                    .map(|c| c.shape.dispersion_p_value)
                    .collect::<Vec<_>>(),
            );
            for (k, c) in comparisons.iter_mut().enumerate() {
                c.size.p_adjusted = Some(hs[k]);
                c.shape.p_adjusted = Some(hc[k]);
                c.shape.dispersion_p_adjusted = Some(hd[k]);
            }
        }
        for c in &mut comparisons {
            c.word(self.alpha);
        }
        progress.finish();

        let first = &comparisons[0];
        let size = &global.size;
        let term = &global.shape.terms[0];
        let cterm = &comb.terms[0];
        Ok(Outcome {
            by: self.by.clone(),
            reference,
            groups: GroupSize::of(&groups),
            alpha: self.alpha,
            per_effort,
            size: Size {
                ratio: two.then_some(first.size.ratio),
                ci_low: two.then_some(first.size.ci_low),
                ci_high: two.then_some(first.size.ci_high),
                p_value: size.p_value,
                model: size.model,
                f: size.f,
                df: size.df,
                confidence: size.confidence,
                bootstrap: size.bootstrap,
                resampled: match (ctx.clusters.is_some(), chosen_permute) {
                    (false, _) => "samples within groups",
                    (true, "whole-sites") => "whole sites within groups",
                    (true, _) => "whole sites",
                },
                permutations: size.permutations,
                exact: size.exact,
                smallest_possible_p: size.min_p,
                groups: size
                    .groups
                    .iter()
                    .map(|g| SizeGroup {
                        name: g.name.clone(),
                        n: g.n,
                        geometric_mean_total: (size.model == SizeModel::Geometric)
                            .then_some(g.level),
                        pooled_rate: (size.model == SizeModel::Rate).then_some(g.level),
                        ratio: g.ratio,
                        ci_low: g.ratio_low,
                        ci_high: g.ratio_high,
                    })
                    .collect(),
            },
            shape: Box::new(Shape {
                distance: shape_distance,
                pseudo_f: term.pseudo_f,
                r2: term.r2,
                p_value: term.p_value,
                permutations: global.shape.permutations,
                exact: global.shape.exact,
                smallest_possible_p: term.min_p,
                dispersion_f: global.disp.f,
                dispersion_p_value: global.disp.p_value,
                dispersion_permutations: global.disp.permutations,
                dispersion_groups: global
                    .disp
                    .groups
                    .iter()
                    .map(|g| DispersionGroup {
                        name: g.name.clone(),
                        n: g.n,
                        mean_distance_to_centroid: g.mean_distance,
                    })
                    .collect(),
                rarefied,
            }),
            combined: Box::new(Combined {
                distance: self.combined.distance,
                transform: self.combined.transform,
                pseudo_f: cterm.pseudo_f,
                r2: cterm.r2,
                p_value: cterm.p_value,
                permutations: cterm.permutations,
                fractions: part.as_ref().map(|r| r.fit.fractions),
                adjusted_fractions: part.as_ref().map(|r| r.fit.adjusted_fractions),
                partition_p_values: part.as_ref().map(|r| PartitionP {
                    size_only: r.size_only.p_value,
                    shape_only: r.shape_only.p_value,
                }),
                shape_axes: part.as_ref().map(|r| r.shape.axes),
            }),
            differs: two.then_some(Differs {
                abundance_differs: first.abundance_differs,
                composition_differs: first.composition_differs,
                dispersion_differs: first.dispersion_differs,
            }),
            verdict: comparisons
                .iter()
                .map(|c| c.verdict.as_str())
                .collect::<Vec<_>>()
                .join("\n"),
            comparisons,
            seed: self.seed,
            scheme: global.size.scheme,
            design: vec![chosen],
            permutations: self.permutations,
            assembly_notes: prepared.notes.len(),
            taxa_shown: TAXA_SHOWN,
            notes,
            caution: CAUTION,
        })
    }
}

impl super::Outcome for Outcome {
    fn values(&self) -> Vec<(String, Option<f64>)> {
        let mut values: Vec<(String, Option<f64>)> = vec![
            ("p.size".into(), Some(self.size.p_value)),
            ("p.shape".into(), Some(self.shape.p_value)),
            ("p.dispersion".into(), Some(self.shape.dispersion_p_value)),
            ("p.combined".into(), Some(self.combined.p_value)),
        ];
        if let Some(a) = &self.combined.adjusted_fractions {
            values.push(("adj.size_only".into(), Some(a.size_only)));
            values.push(("adj.shared".into(), Some(a.shared)));
            values.push(("adj.shape_only".into(), Some(a.shape_only)));
            values.push(("adj.unexplained".into(), Some(a.unexplained)));
        }
        let two = self.differs.is_some();
        for c in &self.comparisons {
            let prefix = if two {
                String::new()
            } else {
                format!("{} vs {}.", c.group, c.reference)
            };
            values.push((format!("{prefix}size.ratio"), Some(c.size.ratio)));
            values.push((format!("{prefix}size.ci_low"), Some(c.size.ci_low)));
            values.push((format!("{prefix}size.ci_high"), Some(c.size.ci_high)));
            if !two {
                let (ps, pc, _) = c.effective();
                values.push((format!("{prefix}p.size"), Some(ps)));
                values.push((format!("{prefix}p.shape"), Some(pc)));
            }
        }
        values
    }

    fn notes(&self) -> &[String] {
        &self.notes
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rarefying_depths_parse() {
        assert_eq!(parse_rarefy("min"), Ok(RarefyDepth::Min));
        assert_eq!(parse_rarefy(" 250 "), Ok(RarefyDepth::Individuals(250)));
        assert!(parse_rarefy("0").is_err());
        assert!(parse_rarefy("many").is_err());
    }

    #[test]
    fn a_spec_survives_its_storage_round_trip() {
        let mut s = Spec::new("period", 199, 7);
        s.periods = Some(Periods(vec![(2008, 2015), (2016, 2025)]));
        s.rarefy = Some(Rarefy {
            depth: RarefyDepth::Individuals(100),
            reps: 3,
        });
        s.strata = Some("site".into());
        let stored = serde_json::to_value(super::super::AnalysisSpec::from(s.clone())).unwrap();
        assert_eq!(stored["kind"], "compare");
        match serde_json::from_value::<super::super::AnalysisSpec>(stored).unwrap() {
            super::super::AnalysisSpec::Compare(back) => assert_eq!(back, s),
            other => panic!("not a compare spec: {other:?}"),
        }
    }
}
