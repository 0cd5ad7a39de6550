//! Diversity without the size illusion. Methods and sources:
//! docs/methods.md, "Diversity at equal coverage".
//!
//! Per row: the observed richness and Hill numbers, sample coverage, Chao1,
//! richness rarefied to a stated number of individuals and richness at a
//! common sample coverage; with `--every`, the rows' values per
//! period with bootstrap intervals and their log-linear trends across years
//! (whole years relabelled, as in `trend`); with `--by`, the groups compared
//! at equal coverage (the one-way test of log values of `compare`'s size test,
//! under the design's permutation scheme).
//!
//! Raw richness carries size: a row with fewer individuals shows fewer taxa
//! even when its community is the same. Richness at equal coverage compares
//! rows at the same completeness of their samples (Chao & Jost 2012, Ecology
//! 93:2533–2547), so the two readings side by side say whether a change in
//! richness is more than the change in numbers.

use serde::{Deserialize, Serialize};

use crate::analysis::diversity::{AtCoverage, CurvePoint, Sample, common_coverage, mean_interval};
use crate::analysis::linear_model::Grouping;
use crate::analysis::size_test::{SizeGroup, SizeTestOptions, size_test};
use crate::analysis::trend::{LogTrend, log_trend};
use crate::matrix::{SampleMeta, Unit};
use crate::store::{Selection, Store};

use super::design::{self, PermuteDesign};
use super::trend::{Every, seasons};
use super::{Analysis, Prepared, Progress, Result, WorkflowError};

/// The run kind.
pub const KIND: &str = "diversity";

/// Bootstrap resamples of the period and group means unless given.
pub const DEFAULT_BOOTSTRAP: usize = 999;
/// Significance level of the reading unless given.
pub const DEFAULT_ALPHA: f64 = 0.05;
/// An automatic common coverage below this is noted as too low to compare much.
const LOW_COVERAGE: f64 = 0.5;
/// Interval coverage of the group ratios.
const CONFIDENCE: f64 = 0.95;
/// First generator stream of the period and group bootstraps (stream
/// `BOOTSTRAP_STREAMS + i` for the i-th period or group and measure); the
/// permutation blocks use streams 0, 1, … and the size test's bootstrap `u64::MAX`.
const BOOTSTRAP_STREAMS: u64 = 1 << 40;

/// The coverage at which rows are compared.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum CoverageTarget {
    /// The lowest sample coverage among the rows: every row is compared on its
    /// own rarefaction curve.
    Auto,
    /// A stated coverage, 0 < C ≤ 1.
    Level(f64),
}

/// Parse `--coverage`: `auto`, `none`, or a coverage as a fraction (0.9) or a
/// percentage (90%).
///
/// # Errors
/// Text that is none of these, or a coverage outside (0, 1].
pub fn parse_coverage(s: &str) -> std::result::Result<Option<CoverageTarget>, String> {
    let t = s.trim();
    if t.eq_ignore_ascii_case("auto") {
        return Ok(Some(CoverageTarget::Auto));
    }
    if t.eq_ignore_ascii_case("none") {
        return Ok(None);
    }
    let (num, scale) = match t.strip_suffix('%') {
        Some(p) => (p.trim(), 100.0),
        None => (t, 1.0),
    };
    let c: f64 = num.parse().map_err(|_| {
        format!(
            "expected auto, none, a fraction such as 0.9 or a percentage such as 90%, got '{s}'"
        )
    })?;
    let c = c / scale;
    if c > 0.0 && c <= 1.0 {
        Ok(Some(CoverageTarget::Level(c)))
    } else {
        Err(format!(
            "a sample coverage lies above 0 and at most 1 (100%), got '{s}'"
        ))
    }
}

/// What one diversity measure is.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Measure {
    /// Observed richness (Hill number of order 0).
    Richness,
    /// Richness at the common coverage.
    CoverageRichness,
    /// Hill number of order 1.
    HillQ1,
    /// Hill number of order 2.
    HillQ2,
}

impl Measure {
    /// Every measure, in the order of the tables.
    pub const ALL: [Measure; 4] = [
        Measure::Richness,
        Measure::CoverageRichness,
        Measure::HillQ1,
        Measure::HillQ2,
    ];

    /// Stable name (the JSON key).
    pub fn name(self) -> &'static str {
        match self {
            Measure::Richness => "richness",
            Measure::CoverageRichness => "coverage_richness",
            Measure::HillQ1 => "hill_q1",
            Measure::HillQ2 => "hill_q2",
        }
    }

    fn of(self, r: &Row) -> Option<f64> {
        match self {
            Measure::Richness => (r.richness > 0).then_some(r.richness as f64),
            Measure::CoverageRichness => r.coverage_richness,
            Measure::HillQ1 => r.hill_q1,
            Measure::HillQ2 => r.hill_q2,
        }
    }
}

/// What to compute.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Spec {
    /// Rarefy every row to this many individuals.
    pub rarefy_to: Option<u64>,
    /// The coverage rows are compared at (`None`: no coverage-standardised values).
    pub coverage: Option<CoverageTarget>,
    /// Per-period values and trends across years.
    pub every: Option<Every>,
    /// Compare the groups of this field at equal coverage.
    pub by: Option<String>,
    /// Permute only within the levels of this field (`--by`).
    pub strata: Option<String>,
    /// How rows are exchanged in the group tests.
    pub scheme: PermuteDesign,
    /// Significance level of the reading.
    pub alpha: f64,
    /// Bootstrap resamples of the period and group summaries.
    pub bootstrap: usize,
    /// Random permutations (year relabellings) per test.
    pub permutations: usize,
    /// Seed of the random streams.
    pub seed: u64,
}

impl Spec {
    /// The default spec with `permutations` and `seed`: coverage `auto`, no
    /// periods, no groups.
    pub fn new(permutations: usize, seed: u64) -> Spec {
        Spec {
            rarefy_to: None,
            coverage: Some(CoverageTarget::Auto),
            every: None,
            by: None,
            strata: None,
            scheme: PermuteDesign::Auto,
            alpha: DEFAULT_ALPHA,
            bootstrap: DEFAULT_BOOTSTRAP,
            permutations,
            seed,
        }
    }
}

/// One row of the matrix and its diversity.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Row {
    /// The row's metadata, as `matrix` gives it.
    #[serde(flatten)]
    pub meta: SampleMeta,
    /// Individuals counted.
    pub individuals: u64,
    /// Taxa seen (Hill number of order 0).
    pub richness: u64,
    /// `exp` of Shannon entropy (order 1); `null` without individuals.
    pub hill_q1: Option<f64>,
    /// Inverse Simpson concentration (order 2); `null` without individuals.
    pub hill_q2: Option<f64>,
    /// Estimated sample coverage; `null` below two individuals.
    pub coverage: Option<f64>,
    /// Chao1 richness; `null` below two individuals.
    pub chao1: Option<f64>,
    /// Lower end of its log-normal 95 % interval (`null` when nothing is estimated missing).
    pub chao1_ci_low: Option<f64>,
    /// Upper end.
    pub chao1_ci_high: Option<f64>,
    /// Expected richness of `rarefy_to` individuals; `null` for fewer individuals.
    pub rarefied_richness: Option<f64>,
    /// Its standard deviation over subsamples.
    pub rarefied_sd: Option<f64>,
    /// Richness at the common coverage; `null` when the row cannot reach it.
    pub coverage_richness: Option<f64>,
    /// Individuals at which the row reaches the common coverage.
    pub coverage_size: Option<f64>,
    /// True when that size lies beyond the row's own individuals.
    pub coverage_extrapolated: Option<bool>,
}

/// The common coverage and how it was chosen.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CoverageLevel {
    /// The coverage (0–1).
    pub level: f64,
    /// `asked` or `auto` (the lowest sample coverage among the rows).
    pub rule: &'static str,
    /// The row that sets an `auto` level.
    pub set_by: Option<String>,
    /// Rows that reach it by interpolation.
    pub interpolated: usize,
    /// Rows that reach it by extrapolation (at most twice their individuals).
    pub extrapolated: usize,
    /// Rows that cannot reach it (beyond twice their size, or below two individuals).
    pub not_reached: usize,
}

/// Mean of one measure over some rows, with a bootstrap interval.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Summary {
    /// Rows with a value.
    pub rows: usize,
    /// Their mean.
    pub mean: Option<f64>,
    /// 2.5 % point of the bootstrap means.
    pub ci_low: Option<f64>,
    /// 97.5 % point.
    pub ci_high: Option<f64>,
}

/// Rows of one period or group.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Block {
    /// The period label (`2016`, `2016-spring`) or group name.
    pub name: String,
    /// Year of a period.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub year: Option<i32>,
    /// Season of a period.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub season: Option<String>,
    /// Rows.
    pub rows: usize,
    /// Distinct sites.
    pub sites: usize,
    /// Individuals of all its rows.
    pub individuals: u64,
    /// Taxa seen in any of its rows.
    pub taxa_seen: u64,
    /// Mean observed richness per row.
    pub richness: Summary,
    /// Mean richness at the common coverage per row.
    pub coverage_richness: Summary,
    /// Mean Hill number of order 1 per row.
    pub hill_q1: Summary,
    /// Mean Hill number of order 2 per row.
    pub hill_q2: Summary,
}

/// The trend of one measure across years.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct MeasureTrend {
    /// The measure.
    pub measure: Measure,
    /// The log-linear trend of its per-row values.
    #[serde(flatten)]
    pub trend: LogTrend,
    /// Rows left out (no value).
    pub left_out: usize,
}

/// The comparison of one measure between groups.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct MeasureTest {
    /// The measure.
    pub measure: Measure,
    /// Rows with a value.
    pub rows: usize,
    /// The reference group.
    pub reference: String,
    /// Geometric mean per group and its ratio to the reference, with a bootstrap interval.
    pub groups: Vec<SizeGroup>,
    /// One-way F on the log values.
    pub f: f64,
    /// Degrees of freedom.
    pub df: (usize, usize),
    /// Permutation p-value.
    pub p_value: f64,
    /// Permutations evaluated.
    pub permutations: usize,
    /// Exactly enumerated.
    pub exact: bool,
    /// Smallest attainable p-value.
    pub smallest_possible_p: f64,
}

/// Points of a curve per side (rarefaction, extrapolation).
const CURVE_POINTS: usize = 24;
/// Rows drawn one curve each when there are no periods or groups; more are pooled.
const CURVE_ROWS: usize = 12;

/// The rarefaction and extrapolation curve of the pooled rows of one period or
/// group (or of one row).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Curve {
    /// The period, group or row.
    pub name: String,
    /// Individuals of the pooled rows.
    pub individuals: u64,
    /// Taxa seen.
    pub richness: u64,
    /// Points from 1 individual to twice the individuals.
    pub points: Vec<CurvePoint>,
}

/// How the two readings of richness compare.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Reading {
    /// Raw richness changed, richness at equal coverage did not: the change is
    /// in the number of individuals (size), not in the taxa.
    SizeOnly,
    /// Richness at equal coverage changed too: more than numbers.
    BeyondSize,
    /// Richness at equal coverage changed while raw richness did not.
    HiddenBySize,
    /// Neither reading changed.
    NoChange,
    /// The design's smallest possible p-value is above alpha: no reading.
    CannotReachAlpha,
}

/// What was computed.
#[derive(Debug, Clone, Serialize)]
pub struct Outcome {
    /// Rows analysed.
    pub n: usize,
    /// What one row is.
    pub unit: Unit,
    /// The common coverage, when asked for.
    pub coverage: Option<CoverageLevel>,
    /// The rarefaction depth, when asked for.
    pub rarefy_to: Option<u64>,
    /// One entry per row.
    pub rows: Vec<Row>,
    /// Per period (`--every`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub periods: Option<Vec<Block>>,
    /// Trends of each measure across years (`--every`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub trends: Option<Vec<MeasureTrend>>,
    /// How whole years were relabelled.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub trend_scheme: Option<String>,
    /// The field of `--by`.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub by: Option<String>,
    /// Per group (`--by`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub groups: Option<Vec<Block>>,
    /// Group comparisons of each measure (`--by`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub tests: Option<Vec<MeasureTest>>,
    /// The scheme the groups were tested under.
    pub design: Vec<design::TermScheme>,
    /// Rarefaction and extrapolation curves of pooled rows: one per period or
    /// group, else one per row (rows pooled into one curve beyond 12).
    pub curves: Vec<Curve>,
    /// Raw richness against richness at equal coverage.
    pub reading: Option<Reading>,
    /// p-values of raw richness and of richness at equal coverage behind the reading.
    pub reading_p: Option<(f64, f64)>,
    /// Significance level of the reading.
    pub alpha: f64,
    /// Bootstrap resamples.
    pub bootstrap: usize,
    /// Seed.
    pub seed: u64,
    /// Fingerprint of the matrix analysed.
    pub fingerprint: String,
    /// Notes for the user: the assembly's, then the analysis's own.
    pub notes: Vec<String>,
}

/// The effective selection of a diversity run: without a `--unit`, `--every`
/// pools rows per site and period, as `trend` does; rows that caught nothing are
/// kept (listed with zero individuals; no measure of diversity is defined for
/// them, and they are left out of the summaries and tests by name).
///
/// # Errors
/// As [`super::resolve`].
pub fn resolve(
    store: &Store,
    saved: Option<&str>,
    explicit: &Selection,
    spec: &Spec,
) -> Result<Selection> {
    super::trend::resolve_periods(store, saved, explicit, spec.every)
}

/// Labels of some rows, at most five, for notes.
fn some_labels(rows: &[Row], idx: &[usize]) -> String {
    let mut s: Vec<&str> = idx
        .iter()
        .take(5)
        .map(|&i| rows[i].meta.label.as_str())
        .collect();
    if idx.len() > 5 {
        s.push("…");
    }
    s.join(", ")
}

impl Spec {
    fn check(&self, prepared: &Prepared) -> Result<()> {
        if prepared.selection.per_effort {
            return Err(WorkflowError::Invalid {
                option: "--per-effort",
                reason: "diversity estimators count individuals, and counts per unit effort \
                         are not individuals; drop --per-effort (effort enters through the \
                         sample coverage, which compares rows at equal completeness)"
                    .into(),
            });
        }
        if self.every.is_some() && self.by.is_some() {
            return Err(WorkflowError::Invalid {
                option: "--by",
                reason: "choose --every (periods and trends) or --by (groups), not both".into(),
            });
        }
        if self.strata.is_some() && self.by.is_none() {
            return Err(WorkflowError::Invalid {
                option: "--strata",
                reason: "--strata restricts the group tests of --by; give --by".into(),
            });
        }
        if self.rarefy_to == Some(0) {
            return Err(WorkflowError::Invalid {
                option: "--rarefy-to",
                reason: "a subsample of 0 individuals holds no taxa; give at least 1".into(),
            });
        }
        if let Some(CoverageTarget::Level(c)) = self.coverage
            && !(c > 0.0 && c <= 1.0)
        {
            return Err(WorkflowError::Invalid {
                option: "--coverage",
                reason: format!("a sample coverage lies above 0 and at most 1, got {c}"),
            });
        }
        if (self.every.is_some() || self.by.is_some()) && self.coverage.is_none() {
            return Err(WorkflowError::Invalid {
                option: "--coverage",
                reason: "periods and groups are compared at equal coverage: give --coverage \
                         auto or a level"
                    .into(),
            });
        }
        design::check_alpha(self.alpha)
    }

    /// Per-row values, the common coverage and its notes.
    fn rows(
        &self,
        prepared: &Prepared,
        notes: &mut Vec<String>,
    ) -> Result<(Vec<Row>, Option<CoverageLevel>)> {
        let m = &prepared.matrix;
        let samples: Vec<Sample> = (0..m.samples.len())
            .map(|i| {
                let v: Vec<f64> = m.values.row(i).iter().copied().collect();
                Sample::new(&v).map_err(|e| WorkflowError::kernel("diversity", e, m))
            })
            .collect::<Result<_>>()?;
        let level = match self.coverage {
            None => None,
            Some(CoverageTarget::Level(c)) => Some((c, "asked", None)),
            Some(CoverageTarget::Auto) => {
                let (c, at) = common_coverage(&samples).ok_or_else(|| {
                    WorkflowError::Refused(
                        "no row holds two individuals: sample coverage cannot be estimated; \
                         pool rows into larger units (--unit site-year) or give --coverage none"
                            .into(),
                    )
                })?;
                if c < LOW_COVERAGE {
                    notes.push(format!(
                        "the common coverage is {:.1} %, set by row {} ({} individuals): at so \
                         low a coverage every row is compared on a very incomplete sample; pool \
                         rows into larger units (--unit site-year) or state a level with \
                         --coverage (rows that cannot reach it are left out, by name)",
                        100.0 * c,
                        m.samples[at].label,
                        samples[at].individuals()
                    ));
                }
                Some((c, "auto", Some(m.samples[at].label.clone())))
            }
        };
        let mut rows = Vec::with_capacity(samples.len());
        let (mut interpolated, mut extrapolated, mut missed) = (0, 0, Vec::new());
        let mut short = Vec::new();
        for (i, s) in samples.iter().enumerate() {
            let chao = s.chao1();
            let rare = self.rarefy_to.and_then(|d| s.rarefied(d, true));
            if self.rarefy_to.is_some() && rare.is_none() {
                short.push(i);
            }
            let at = level.as_ref().map(|(c, ..)| s.at_coverage(*c));
            let (cr, size, ext) = match at {
                Some(AtCoverage::Reached {
                    size,
                    richness,
                    extrapolated: e,
                }) => {
                    if e {
                        extrapolated += 1;
                    } else {
                        interpolated += 1;
                    }
                    (Some(richness), Some(size), Some(e))
                }
                Some(_) => {
                    missed.push(i);
                    (None, None, None)
                }
                None => (None, None, None),
            };
            rows.push(Row {
                meta: m.samples[i].clone(),
                individuals: s.individuals(),
                richness: s.richness(),
                hill_q1: s.hill_q1(),
                hill_q2: s.hill_q2(),
                coverage: s.coverage(),
                chao1: chao.map(|c| c.estimate),
                chao1_ci_low: chao.and_then(|c| c.interval).map(|i| i.0),
                chao1_ci_high: chao.and_then(|c| c.interval).map(|i| i.1),
                rarefied_richness: rare.map(|r| r.richness),
                rarefied_sd: rare.and_then(|r| r.sd),
                coverage_richness: cr,
                coverage_size: size,
                coverage_extrapolated: ext,
            });
        }
        if !short.is_empty() {
            notes.push(format!(
                "{} fewer than {} individuals and no rarefied richness ({})",
                match short.len() {
                    1 => "1 row holds".to_string(),
                    k => format!("{k} rows hold"),
                },
                self.rarefy_to.unwrap_or(0),
                some_labels(&rows, &short)
            ));
        }
        let empty: Vec<usize> = (0..rows.len())
            .filter(|&i| rows[i].individuals == 0)
            .collect();
        if !empty.is_empty() {
            notes.push(format!(
                "{} caught nothing: listed with 0 individuals, and no measure \
                 of diversity is defined for them ({})",
                crate::words::count(empty.len(), "row", "rows"),
                some_labels(&rows, &empty)
            ));
        }
        if !missed.is_empty() {
            notes.push(format!(
                "{} cannot reach the common coverage within twice their individuals (or \
                 hold fewer than two): no richness at equal coverage for them ({})",
                crate::words::count(missed.len(), "row", "rows"),
                some_labels(&rows, &missed)
            ));
        }
        let level = level.map(|(c, rule, set_by)| CoverageLevel {
            level: c,
            rule,
            set_by,
            interpolated,
            extrapolated,
            not_reached: missed.len(),
        });
        Ok((rows, level))
    }

    /// Summaries of the rows `idx`.
    fn block(
        &self,
        prepared: &Prepared,
        name: String,
        rows: &[Row],
        idx: &[usize],
        stream: u64,
    ) -> Block {
        let mut sites: Vec<&str> = idx.iter().map(|&i| rows[i].meta.site.as_str()).collect();
        sites.sort_unstable();
        sites.dedup();
        let summary = |k: u64, measure: Measure| -> Summary {
            let v: Vec<f64> = idx.iter().filter_map(|&i| measure.of(&rows[i])).collect();
            let (mean, ci) = mean_interval(&v, self.bootstrap, self.seed, stream * 4 + k);
            Summary {
                rows: v.len(),
                mean,
                ci_low: ci.map(|c| c.0),
                ci_high: ci.map(|c| c.1),
            }
        };
        Block {
            name,
            year: None,
            season: None,
            rows: idx.len(),
            sites: sites.len(),
            individuals: idx.iter().map(|&i| rows[i].individuals).sum(),
            taxa_seen: taxa_seen(prepared, idx),
            richness: summary(0, Measure::Richness),
            coverage_richness: summary(1, Measure::CoverageRichness),
            hill_q1: summary(2, Measure::HillQ1),
            hill_q2: summary(3, Measure::HillQ2),
        }
    }
}

/// The curves of an outcome: of each period or group's pooled rows, else of
/// each row (or of all rows pooled, when there are many).
fn curves(prepared: &Prepared, out: &Outcome) -> Vec<Curve> {
    let v = &prepared.matrix.values;
    let pooled = |name: String, idx: &[usize]| -> Curve {
        // Whole counts: every row was checked when its sample was built.
        let counts: Vec<u64> = (0..v.ncols())
            .map(|j| idx.iter().map(|&i| v[(i, j)] as u64).sum())
            .collect();
        let s = Sample::from_counts(&counts);
        Curve {
            name,
            individuals: s.individuals(),
            richness: s.richness(),
            points: s.curve(CURVE_POINTS),
        }
    };
    let all: Vec<usize> = (0..out.n).collect();
    if let Some(periods) = &out.periods {
        return periods
            .iter()
            .map(|b| {
                let idx: Vec<usize> = all
                    .iter()
                    .copied()
                    .filter(|&i| {
                        let m = &out.rows[i].meta;
                        Some(m.year) == b.year && m.season == b.season
                    })
                    .collect();
                pooled(b.name.clone(), &idx)
            })
            .collect();
    }
    if let (Some(groups), Some(by)) = (&out.groups, &out.by)
        && let Ok(labels) = prepared.matrix.field_values(by)
    {
        return groups
            .iter()
            .map(|b| {
                let idx: Vec<usize> = all
                    .iter()
                    .copied()
                    .filter(|&i| labels[i] == b.name)
                    .collect();
                pooled(b.name.clone(), &idx)
            })
            .collect();
    }
    if out.n <= CURVE_ROWS {
        all.iter()
            .map(|&i| pooled(out.rows[i].meta.label.clone(), &[i]))
            .collect()
    } else {
        vec![pooled(format!("all {} rows pooled", out.n), &all)]
    }
}

/// Taxa with at least one individual in the rows `idx` of `prepared`.
fn taxa_seen(prepared: &Prepared, idx: &[usize]) -> u64 {
    let v = &prepared.matrix.values;
    (0..v.ncols())
        .filter(|&j| idx.iter().any(|&i| v[(i, j)] > 0.0))
        .count() as u64
}

/// The reading of raw richness (p `raw`) against richness at equal coverage (p
/// `cov`), tested by a design whose smallest possible p-value is `smallest`.
fn reading(raw: f64, cov: f64, alpha: f64, smallest: f64) -> Reading {
    if smallest > alpha {
        return Reading::CannotReachAlpha;
    }
    match (raw <= alpha, cov <= alpha) {
        (true, false) => Reading::SizeOnly,
        (_, true) if raw <= alpha => Reading::BeyondSize,
        (false, true) => Reading::HiddenBySize,
        _ => Reading::NoChange,
    }
}

impl Analysis for Spec {
    const KIND: &'static str = KIND;
    type Outcome = Outcome;

    fn seed(&self) -> Option<u64> {
        Some(self.seed)
    }

    fn run(&self, prepared: &Prepared, progress: &dyn Progress) -> Result<Outcome> {
        self.check(prepared)?;
        let m = &prepared.matrix;
        if m.samples.is_empty() {
            return Err(WorkflowError::Refused("no rows to analyse".into()));
        }
        let mut notes = prepared.notes.clone();
        progress.stage("diversity");
        let (rows, coverage) = self.rows(prepared, &mut notes)?;
        let n = rows.len();
        let mut out = Outcome {
            n,
            unit: prepared.unit(),
            coverage,
            rarefy_to: self.rarefy_to,
            rows,
            periods: None,
            trends: None,
            trend_scheme: None,
            by: self.by.clone(),
            groups: None,
            tests: None,
            design: Vec::new(),
            curves: Vec::new(),
            reading: None,
            reading_p: None,
            alpha: self.alpha,
            bootstrap: self.bootstrap,
            seed: self.seed,
            fingerprint: prepared.fingerprint(),
            notes: Vec::new(),
        };
        if let Some(every) = self.every {
            self.periods(prepared, every, &mut out, &mut notes)?;
        }
        if let Some(by) = &self.by {
            self.groups(prepared, by, &mut out, &mut notes)?;
        }
        out.curves = curves(prepared, &out);
        progress.finish();
        out.notes = notes;
        Ok(out)
    }
}

impl Spec {
    fn periods(
        &self,
        prepared: &Prepared,
        every: Every,
        out: &mut Outcome,
        notes: &mut Vec<String>,
    ) -> Result<()> {
        let m = &prepared.matrix;
        if prepared.unit() == Unit::Site {
            return Err(WorkflowError::Refused(
                "--unit site pools every year into one row; periods need a unit with one \
                 period per row (site-year, site-season or event)"
                    .into(),
            ));
        }
        if let Some(s) = m.samples.iter().find(|s| s.year != s.last_year) {
            return Err(WorkflowError::Refused(format!(
                "row {} pools several years; choose a unit with one year per row",
                s.label
            )));
        }
        let (season_names, season) = match every {
            Every::Year => (None, None),
            Every::Season => {
                let (names, codes) = seasons(m)?;
                (Some(names), Some(codes))
            }
        };
        let year: Vec<i32> = m.samples.iter().map(|s| s.year).collect();
        let (site, _) = design::site_codes(m);
        let mut keys: Vec<(i32, Option<usize>)> = (0..out.n)
            .map(|i| (year[i], season.as_ref().map(|s| s[i])))
            .collect();
        keys.sort_unstable();
        keys.dedup();
        let mut periods = Vec::with_capacity(keys.len());
        for (b, &(y, s)) in keys.iter().enumerate() {
            let idx: Vec<usize> = (0..out.n)
                .filter(|&i| year[i] == y && season.as_ref().map(|c| c[i]) == s)
                .collect();
            let season_name = s.and_then(|_| season_names.as_ref().map(|n| n[idx[0]].clone()));
            let name = match &season_name {
                Some(sn) => format!("{y}-{sn}"),
                None => y.to_string(),
            };
            let mut block = self.block(
                prepared,
                name,
                &out.rows,
                &idx,
                BOOTSTRAP_STREAMS + b as u64,
            );
            block.year = Some(y);
            block.season = season_name;
            periods.push(block);
        }
        let mut trends = Vec::new();
        for measure in Measure::ALL {
            let keep: Vec<usize> = (0..out.n)
                .filter(|&i| measure.of(&out.rows[i]).is_some())
                .collect();
            if measure == Measure::CoverageRichness && out.coverage.is_none() {
                continue;
            }
            let values: Vec<f64> = keep
                .iter()
                .filter_map(|&i| measure.of(&out.rows[i]))
                .collect();
            let pick_i32 = |v: &[i32]| -> Vec<i32> { keep.iter().map(|&i| v[i]).collect() };
            let pick = |v: &[usize]| -> Vec<usize> { keep.iter().map(|&i| v[i]).collect() };
            let ss = season.as_deref().map(pick);
            match log_trend(
                &values,
                &pick_i32(&year),
                &pick(&site),
                ss.as_deref(),
                self.permutations,
                self.seed,
            ) {
                Ok(t) => trends.push(MeasureTrend {
                    measure,
                    trend: t,
                    left_out: out.n - keep.len(),
                }),
                Err(e) => notes.push(format!(
                    "no trend of {}: {}",
                    measure.name(),
                    WorkflowError::kernel("diversity trend", e, m)
                )),
            }
        }
        let p_of = |ms: Measure| {
            trends
                .iter()
                .find(|t| t.measure == ms)
                .map(|t| t.trend.p_value)
        };
        if let (Some(raw), Some(cov)) = (p_of(Measure::Richness), p_of(Measure::CoverageRichness)) {
            let smallest = trends
                .iter()
                .map(|t| t.trend.smallest_possible_p)
                .fold(0.0, f64::max);
            out.reading = Some(reading(raw, cov, self.alpha, smallest));
            out.reading_p = Some((raw, cov));
        }
        out.trend_scheme = Some(format!(
            "whole years relabelled together across all sites; site{} held fixed",
            if season.is_some() { ", season" } else { "" }
        ));
        out.periods = Some(periods);
        out.trends = Some(trends);
        Ok(())
    }

    fn groups(
        &self,
        prepared: &Prepared,
        by: &str,
        out: &mut Outcome,
        notes: &mut Vec<String>,
    ) -> Result<()> {
        let m = &prepared.matrix;
        let groups = design::grouping(m, by, "--by")?;
        let chosen =
            design::term_scheme(m, self.scheme, self.strata.as_deref(), by, groups.codes())?;
        let (site, n_sites) = design::site_codes(m);
        let clusters = (n_sites < out.n
            && matches!(chosen.permute, "whole-sites" | "within-sites"))
        .then_some(site);
        let mut blocks = Vec::new();
        for (g, name) in groups.levels().iter().enumerate() {
            let idx: Vec<usize> = (0..out.n).filter(|&i| groups.codes()[i] == g).collect();
            let block = self.block(
                prepared,
                name.clone(),
                &out.rows,
                &idx,
                BOOTSTRAP_STREAMS + g as u64,
            );
            blocks.push(block);
        }
        let mut tests = Vec::new();
        for measure in Measure::ALL {
            if measure == Measure::CoverageRichness && out.coverage.is_none() {
                continue;
            }
            let keep: Vec<usize> = (0..out.n)
                .filter(|&i| measure.of(&out.rows[i]).is_some())
                .collect();
            let values: Vec<f64> = keep
                .iter()
                .filter_map(|&i| measure.of(&out.rows[i]))
                .collect();
            let labels: Vec<&str> = keep
                .iter()
                .map(|&i| groups.levels()[groups.codes()[i]].as_str())
                .collect();
            let sub = Grouping::from_labels(&labels);
            let opts = SizeTestOptions {
                permutations: self.permutations,
                seed: self.seed,
                scheme: chosen.scheme.subset(&keep),
                bootstrap: self.bootstrap,
                reference: 0,
                confidence: CONFIDENCE,
                clusters: clusters
                    .as_ref()
                    .map(|c| keep.iter().map(|&i| c[i]).collect()),
            };
            match size_test(&values, &sub, &opts, None) {
                Ok(r) => tests.push(MeasureTest {
                    measure,
                    rows: keep.len(),
                    reference: r.reference,
                    groups: r.groups,
                    f: r.f,
                    df: r.df,
                    p_value: r.p_value,
                    permutations: r.permutations,
                    exact: r.exact,
                    smallest_possible_p: r.min_p,
                }),
                Err(e) => notes.push(format!(
                    "no group test of {}: {}",
                    measure.name(),
                    WorkflowError::kernel("diversity group test", e, m)
                )),
            }
        }
        let p_of = |ms: Measure| tests.iter().find(|t| t.measure == ms).map(|t| t.p_value);
        if let (Some(raw), Some(cov)) = (p_of(Measure::Richness), p_of(Measure::CoverageRichness)) {
            let smallest = tests
                .iter()
                .map(|t| t.smallest_possible_p)
                .fold(0.0, f64::max);
            out.reading = Some(reading(raw, cov, self.alpha, smallest));
            out.reading_p = Some((raw, cov));
        }
        out.design = vec![chosen];
        out.groups = Some(blocks);
        out.tests = Some(tests);
        Ok(())
    }
}

impl super::Outcome for Outcome {
    fn values(&self) -> Vec<(String, Option<f64>)> {
        let mut vals = Vec::new();
        if let Some(c) = &self.coverage {
            vals.push(("coverage_level".to_string(), Some(c.level)));
        }
        let mean_rows = |key: &str, f: &dyn Fn(&Row) -> Option<f64>| {
            let v: Vec<f64> = self.rows.iter().filter_map(f).collect();
            (
                key.to_string(),
                (!v.is_empty()).then(|| v.iter().sum::<f64>() / v.len() as f64),
            )
        };
        vals.push(mean_rows("mean_richness", &|r| {
            (r.individuals > 0).then_some(r.richness as f64)
        }));
        vals.push(mean_rows("mean_coverage_richness", &|r| {
            r.coverage_richness
        }));
        for (kind, blocks) in [("period", &self.periods), ("group", &self.groups)] {
            for b in blocks.iter().flatten() {
                vals.push((format!("{kind}.{}.richness", b.name), b.richness.mean));
                vals.push((
                    format!("{kind}.{}.coverage_richness", b.name),
                    b.coverage_richness.mean,
                ));
            }
        }
        for t in self.trends.iter().flatten() {
            let k = t.measure.name();
            vals.push((
                format!("trend.{k}.pct_per_year"),
                Some(t.trend.pct_per_year),
            ));
            vals.push((format!("trend.{k}.p_value"), Some(t.trend.p_value)));
        }
        for t in self.tests.iter().flatten() {
            let k = t.measure.name();
            vals.push((format!("test.{k}.f"), Some(t.f)));
            vals.push((format!("test.{k}.p_value"), Some(t.p_value)));
        }
        vals
    }

    fn notes(&self) -> &[String] {
        &self.notes
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn coverage_text_parses() {
        assert_eq!(parse_coverage("auto"), Ok(Some(CoverageTarget::Auto)));
        assert_eq!(parse_coverage("none"), Ok(None));
        assert_eq!(parse_coverage("0.9"), Ok(Some(CoverageTarget::Level(0.9))));
        assert_eq!(parse_coverage("95%"), Ok(Some(CoverageTarget::Level(0.95))));
        assert!(parse_coverage("0").is_err());
        assert!(parse_coverage("1.2").is_err());
        assert!(parse_coverage("ninety").is_err());
    }

    #[test]
    fn the_reading_keeps_the_two_richnesses_apart() {
        assert_eq!(reading(0.01, 0.4, 0.05, 0.001), Reading::SizeOnly);
        assert_eq!(reading(0.01, 0.02, 0.05, 0.001), Reading::BeyondSize);
        assert_eq!(reading(0.3, 0.02, 0.05, 0.001), Reading::HiddenBySize);
        assert_eq!(reading(0.3, 0.2, 0.05, 0.001), Reading::NoChange);
        assert_eq!(reading(0.1, 0.7, 0.05, 0.1), Reading::CannotReachAlpha);
    }

    #[test]
    fn a_spec_round_trips_through_its_stored_form() {
        let mut s = Spec::new(99, 4);
        s.coverage = Some(CoverageTarget::Level(0.9));
        s.every = Some(Every::Season);
        s.rarefy_to = Some(20);
        let text = serde_json::to_string(&s).unwrap();
        assert_eq!(serde_json::from_str::<Spec>(&text).unwrap(), s);
    }
}
