//! Trends across years: what has been happening year after year, and since
//! when — fewer animals (size), different animals (shape), or both
//! (docs/methods.md, "Trends across years (`tally trend`)").
//!
//! [`Spec::run`] builds the per-sample inputs of
//! [`crate::analysis::trend::trend`] from a prepared matrix: the log of each
//! row's total (abundance per unit effort with `--per-effort`), a shape-only
//! dissimilarity (Hellinger, Legendre & Gallagher 2001, Oecologia 129:271–280;
//! or chi-square), a combined dissimilarity split per period into size and
//! shape parts, the year, the season and the site of each row. The size and
//! shape trend tests are db-RDA partial tests of year given site (McArdle &
//! Anderson 2001, Ecology 82:290–297) under permutations of whole years.
//!
//! `--split-by FIELD` is one run per group: [`split`] turns each value of the
//! field into its own [`Selection`] (the base selection with the group as a
//! filter) and prepares it through [`prepare`], so every group's run replays
//! from its stored selection and spec alone.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

use crate::analysis::dissimilarity::Distance;
use crate::analysis::linear_model::Grouping;
use crate::analysis::size_test::SizeModel;
use crate::analysis::transform::Transform;
use crate::analysis::trend::{
    Baseline, BreakpointSpec, CountData, Diagnosis, ShapeTrend, TrendData, TrendOptions, trend,
};
use crate::matrix::{BUILTIN_FIELDS, CountMatrix, Unit};
use crate::store::runs::SeriesPoint;
use crate::store::{Selection, Store};

use super::design::{self, DistanceSpec, PermuteDesign, ShapeDistance};
use super::runs::ToSave;
use super::{Analysis, Prepared, Progress, Result, WorkflowError, prepare};

/// The run kind.
pub const KIND: &str = "trend";

/// Significance level of the diagnosis unless given.
pub const DEFAULT_ALPHA: f64 = 0.05;
/// Periods (and baselines) with fewer samples are listed without summaries, unless given.
pub const DEFAULT_MIN_SAMPLES: usize = 3;
/// Baseline years unless given: the first this many years.
pub const DEFAULT_BASELINE_YEARS: usize = 3;

/// How the size-trend interval is obtained under the geometric model (stored with every outcome).
pub const CI_METHOD: &str = "2.5 and 97.5 % points of slopes refitted to full-model residuals under the same year permutations";
/// How the size-trend interval is obtained under the rate model.
pub const CI_METHOD_RATE: &str = "2.5 and 97.5 % points of one-step (Fisher scoring) year slopes from the full count model's residuals under the same year permutations";

/// The size model of runs stored before the count model existed.
fn geometric_before_rates() -> SizeModel {
    SizeModel::Geometric
}

/// What one period is.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum Every {
    /// One period per (season) year.
    #[default]
    Year,
    /// One period per season of each year.
    Season,
}

impl Every {
    /// Every choice, in documentation order.
    pub const ALL: [Every; 2] = [Every::Year, Every::Season];

    /// Stable name (`year`, `season`).
    pub fn name(self) -> &'static str {
        match self {
            Every::Year => "year",
            Every::Season => "season",
        }
    }

    /// One line for people.
    pub fn help(self) -> &'static str {
        match self {
            Every::Year => "One period per (season) year",
            Every::Season => "One period per season of each year",
        }
    }

    /// The unit of a row when the selection names none: rows pooled per site and period.
    pub fn unit(self) -> Unit {
        match self {
            Every::Year => Unit::SiteYear,
            Every::Season => Unit::SiteSeason,
        }
    }
}

/// Parse `--breakpoint` text: `auto` or a year (the first year "after").
///
/// # Errors
/// Text that is neither.
pub fn parse_breakpoint(s: &str) -> std::result::Result<BreakpointSpec, String> {
    if s.trim().eq_ignore_ascii_case("auto") {
        return Ok(BreakpointSpec::Auto);
    }
    s.trim()
        .parse::<i32>()
        .map(BreakpointSpec::Year)
        .map_err(|_| format!("expected 'auto' or a year, got '{s}'"))
}

/// What to compute on one prepared matrix.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Spec {
    /// What one period is.
    pub every: Every,
    /// Baseline years `A..=B` (`None`: the first [`DEFAULT_BASELINE_YEARS`] years).
    pub baseline: Option<(i32, i32)>,
    /// Breakpoint test, if wanted.
    pub breakpoint: Option<BreakpointSpec>,
    /// Significance level of the diagnosis.
    pub alpha: f64,
    /// Shape-only dissimilarity of the shape trend and the shape distance.
    pub shape_distance: ShapeDistance,
    /// Combined dissimilarity (and its transform), split into size and shape parts per period.
    #[serde(flatten)]
    pub distance: DistanceSpec,
    /// Periods (and baselines) with fewer samples are listed without summaries.
    pub min_samples: usize,
    /// How size is modelled: counts with effort as an offset, rows that caught
    /// nothing included (`rate`), or the log of strictly positive totals (`geometric`).
    #[serde(default = "geometric_before_rates")]
    pub size_model: SizeModel,
    /// The permutation design: the year test relabels whole years across all sites
    /// (a within-sites design); `auto` and `within-sites` choose it, `free` and
    /// `whole-sites` are refused.
    #[serde(default)]
    pub scheme: PermuteDesign,
    /// Random year permutations (every arrangement when there are no more).
    pub permutations: usize,
    /// Seed of the permutation streams.
    pub seed: u64,
    /// Also each taxon's own size trend (`--by-taxon`).
    #[serde(default)]
    pub by_taxon: bool,
}

impl Spec {
    /// The defaults of `tally trend` (yearly periods, first three years as
    /// baseline, no breakpoint, alpha 0.05, Hellinger shape, Bray-Curtis on
    /// square roots as the combined dissimilarity, at least 3 samples).
    pub fn new(permutations: usize, seed: u64) -> Spec {
        Spec {
            every: Every::Year,
            baseline: None,
            breakpoint: None,
            alpha: DEFAULT_ALPHA,
            shape_distance: ShapeDistance::Hellinger,
            distance: DistanceSpec {
                distance: Distance::BrayCurtis,
                transform: Transform::Sqrt,
            },
            min_samples: DEFAULT_MIN_SAMPLES,
            size_model: SizeModel::Rate,
            scheme: PermuteDesign::Auto,
            permutations,
            seed,
            by_taxon: false,
        }
    }

    /// The one rule of `--permute` for a trend: years vary within sites, and the
    /// year test relabels whole years across all sites at once.
    fn check_scheme(&self) -> Result<()> {
        match self.scheme {
            PermuteDesign::Auto | PermuteDesign::WithinSites => Ok(()),
            PermuteDesign::WholeSites => Err(WorkflowError::Refused(
                "--permute whole-sites: year varies within every site, and moving whole sites \
                 carries each site's years with it, so the year term could not change; test the \
                 trend with --permute within-sites (or auto), which relabels whole years across \
                 all sites"
                    .into(),
            )),
            PermuteDesign::Free => Err(WorkflowError::Refused(
                "--permute free: moving single site-years as if independent ignores the \
                 year-to-year swings that all sites share; test the trend with --permute \
                 within-sites (or auto), which relabels whole years across all sites"
                    .into(),
            )),
        }
    }

    fn options(&self) -> TrendOptions {
        TrendOptions {
            baseline: match self.baseline {
                Some((a, b)) => Baseline::Years(a, b),
                None => Baseline::FirstYears(DEFAULT_BASELINE_YEARS),
            },
            breakpoint: self.breakpoint,
            alpha: self.alpha,
            min_samples: self.min_samples,
            permutations: self.permutations,
            seed: self.seed,
        }
    }

    /// Run the trend of every group of a split ([`split`]), in order.
    ///
    /// # Errors
    /// As [`Analysis::run`], with the group named.
    pub fn run_split(
        &self,
        field: &str,
        parts: &[(String, Prepared)],
        progress: &dyn Progress,
    ) -> Result<Split> {
        let mut groups = Vec::with_capacity(parts.len());
        for (value, prepared) in parts {
            let outcome = self
                .run(prepared, progress)
                .map_err(|e| WorkflowError::InGroup {
                    field: field.to_string(),
                    value: value.clone(),
                    source: Box::new(e),
                })?;
            groups.push(Group {
                group: value.clone(),
                outcome,
            });
        }
        Ok(Split {
            split_by: field.to_string(),
            groups,
            alpha: self.alpha,
            seed: self.seed,
            permutations: self.permutations,
        })
    }
}

/// Size trend: abundance on year given site.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SizeTrend {
    /// The size model (`rate`: Poisson log-linear count model with log-effort
    /// offset; `geometric`: OLS of log totals).
    pub model: SizeModel,
    /// `100 (e^slope − 1)`: % change per year.
    pub slope_pct_per_year: f64,
    /// Year-permutation p-value.
    pub p_value: f64,
    /// Lower end of the 95 % interval of the % change per year.
    pub ci_low: f64,
    /// Upper end of that interval.
    pub ci_high: f64,
    /// How the interval is obtained ([`CI_METHOD`]).
    pub ci_method: &'static str,
    /// Year coefficient on the log scale, given site (count model or OLS).
    pub slope_log: f64,
    /// OLS standard error of that slope (geometric model).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub se_ols_log: Option<f64>,
    /// Quasi-Poisson standard error of that slope (rate model).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub se_quasi_log: Option<f64>,
    /// Pearson dispersion of the full count model (rate model).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub dispersion: Option<f64>,
    /// Partial F of year given site (geometric); the score statistic over the
    /// reduced model's dispersion (rate).
    pub pseudo_f: f64,
    /// Residual degrees of freedom.
    pub df_resid: usize,
}

/// The p-values the diagnosis used, and its rule.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Decision {
    /// Size decision p-value.
    pub size_p: f64,
    /// Shape decision p-value.
    pub shape_p: f64,
    /// The rule, in words.
    pub rule: &'static str,
}

/// The best before/after split of size.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SizeBreak {
    /// First year "after".
    pub year: i32,
    /// Max-F permutation p-value (the search accounted for).
    pub p_value: f64,
    /// Pseudo-F of the step given site.
    pub pseudo_f: f64,
    /// % change after vs before.
    pub change_pct: f64,
    /// Candidate years searched (1 for a given year).
    pub candidates: usize,
}

/// The best before/after split of shape.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ShapeBreak {
    /// First year "after".
    pub year: i32,
    /// Max-F permutation p-value (the search accounted for).
    pub p_value: f64,
    /// Pseudo-F of the step given site.
    pub pseudo_f: f64,
    /// Semi-partial R² of the step.
    pub r2: f64,
    /// Candidate years searched (1 for a given year).
    pub candidates: usize,
}

/// Breakpoints of size and shape.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Breakpoints {
    /// Size breakpoint.
    pub size: SizeBreak,
    /// Shape breakpoint.
    pub shape: ShapeBreak,
}

/// The dissimilarities used.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Distances {
    /// Shape-only dissimilarity.
    pub shape: ShapeDistance,
    /// Combined dissimilarity.
    pub combined: Distance,
    /// Transform before the combined dissimilarity.
    pub transform: Transform,
}

/// Summaries of one period.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Period {
    /// Label: the year (`2016`), or year and season (`2016-spring`).
    pub period: String,
    /// Year of the period.
    pub year: i32,
    /// Season name (with `--every season`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub season: Option<String>,
    /// Samples in the period.
    pub n: usize,
    /// Distinct sites in the period.
    pub sites: usize,
    /// True for baseline periods.
    pub baseline: bool,
    /// True when the period (or its reference) has too few samples for summaries.
    pub too_few: bool,
    /// Samples in the reference group.
    pub n_reference: usize,
    /// Geometric mean abundance.
    pub abundance: Option<f64>,
    /// Lower end of its 95 % interval.
    pub abundance_ci_low: Option<f64>,
    /// Upper end of its 95 % interval.
    pub abundance_ci_high: Option<f64>,
    /// Change against the reference, in %.
    pub change_pct: Option<f64>,
    /// Centroid distance to the reference in the shape-only space.
    pub shape_distance: Option<f64>,
    /// Centroid distance to the reference in the combined space.
    pub combined_distance: Option<f64>,
    /// Size part of the squared combined centroid distance.
    pub size_part: Option<f64>,
    /// Shape part of the squared combined centroid distance.
    pub shape_part: Option<f64>,
    /// First event date of the period (ISO 8601).
    pub period_start: String,
    /// Last event date of the period (ISO 8601).
    pub period_end: String,
}

/// What one trend found.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Outcome {
    /// What changed.
    pub diagnosis: Diagnosis,
    /// Significance level.
    pub alpha: f64,
    /// Size trend test.
    pub size_trend: SizeTrend,
    /// Shape trend test.
    pub shape_trend: ShapeTrend,
    /// The decision p-values and rule.
    pub decision: Decision,
    /// Breakpoint tests, when asked.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub breakpoints: Option<Breakpoints>,
    /// One entry per period, in time order.
    pub periods: Vec<Period>,
    /// Rows analysed.
    pub n: usize,
    /// Distinct years.
    pub years: Vec<i32>,
    /// Distinct sites.
    pub sites: usize,
    /// Baseline years.
    pub baseline_years: Vec<i32>,
    /// Permutations evaluated (all arrangements when exact).
    pub permutations: usize,
    /// True when every arrangement of the years was enumerated.
    pub exact: bool,
    /// Seed.
    pub seed: u64,
    /// Permutation scheme, described.
    pub scheme: String,
    /// Smallest p-value the trend tests can give with these years and permutations.
    pub smallest_possible_p: f64,
    /// The dissimilarities.
    pub distances: Distances,
    /// What one row is.
    pub unit: Unit,
    /// Whether abundance is per unit effort.
    pub per_effort: bool,
    /// Fingerprint of the matrix analysed.
    pub fingerprint: String,
    /// The taxa behind the change from the baseline years to the later years:
    /// pooled rates of each side and each taxon's change tested by relabelling
    /// whole years (docs/methods.md, "Taxa behind the change").
    pub taxa: Vec<super::compare::Taxon>,
    /// Each taxon's own size trend, with `--by-taxon`.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub by_taxon: Option<TaxonTrends>,
    /// How many taxa the tables show (`--taxa`; JSON lists every taxon).
    #[serde(skip)]
    pub taxa_shown: usize,
    /// Notes for the user (assembly notes first).
    pub notes: Vec<String>,
}

/// One taxon's own size trend.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TaxonTrend {
    /// Accepted name at the analysed rank.
    pub taxon: String,
    /// Its slope, interval, test and yearly rates.
    #[serde(flatten)]
    pub trend: crate::analysis::trend::TaxonTrend,
}

/// Every taxon's size trend (`trend --by-taxon`): the count model of the size
/// trend fitted to each taxon's counts, tested under the same year relabellings
/// (docs/methods.md, "Taxa behind the change").
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TaxonTrends {
    /// The years of `yearly_rates`.
    pub years: Vec<i32>,
    /// Relabellings evaluated per taxon.
    pub permutations: usize,
    /// True when every arrangement of the years was enumerated.
    pub exact: bool,
    /// Smallest p-value a taxon's test can give.
    pub smallest_possible_p: f64,
    /// Taxa by size of change (largest |slope| first; taxa without a slope last).
    pub taxa: Vec<TaxonTrend>,
}

impl TaxonTrends {
    /// Each taxon of `m` (counts and effort as the size trend uses them) by its own trend.
    fn of(
        m: &CountMatrix,
        per_effort: bool,
        year: &[i32],
        site: &[usize],
        season: Option<&[usize]>,
        spec: &Spec,
    ) -> Result<TaxonTrends> {
        let all: Vec<usize> = (0..m.samples.len()).collect();
        let (counts, effort) = design::taxon_counts(m, per_effort, &all);
        let r = crate::analysis::trend::taxon_trends(
            &counts,
            &effort,
            year,
            site,
            season,
            spec.permutations,
            spec.seed,
        )
        .map_err(|e| WorkflowError::kernel("per-taxon trends", e, m))?;
        let mut taxa: Vec<TaxonTrend> = r
            .taxa
            .into_iter()
            .map(|t| TaxonTrend {
                taxon: m.taxa[t.column].name.clone(),
                trend: t,
            })
            .collect();
        let size = |t: &TaxonTrend| t.trend.slope_log.map_or(-1.0, f64::abs);
        taxa.sort_by(|a, b| size(b).total_cmp(&size(a)));
        Ok(TaxonTrends {
            years: r.years,
            permutations: r.permutations,
            exact: r.exact,
            smallest_possible_p: r.smallest_possible_p,
            taxa,
        })
    }
}

/// One group of a split trend.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Group {
    /// The value of the split field (empty for an unsplit trend).
    pub group: String,
    /// Its trend (has no key `group`, so flattening is safe).
    #[serde(flatten)]
    pub outcome: Outcome,
}

/// The trends of every group of `--split-by FIELD`, as `tally trend` prints them.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Split {
    /// The split field.
    pub split_by: String,
    /// One trend per group, in the order of the values.
    pub groups: Vec<Group>,
    /// Significance level.
    pub alpha: f64,
    /// Seed (the same for every group).
    pub seed: u64,
    /// Permutations asked for.
    pub permutations: usize,
}

impl Split {
    /// The runs to store: one per group, each on its own prepared selection.
    ///
    /// # Errors
    /// Serialisation errors.
    pub fn to_save<'a>(
        &self,
        spec: &Spec,
        parts: &'a [(String, Prepared)],
    ) -> Result<Vec<ToSave<'a>>> {
        parts
            .iter()
            .zip(&self.groups)
            .map(|((_, p), g)| ToSave::new(p, spec, &g.outcome))
            .collect()
    }
}

/// The season of every row of `m` and its code, seasons numbered in calendar
/// order within the season year (spring, summer, autumn, winter, then other
/// windows by name), for `--every season`.
///
/// # Errors
/// [`WorkflowError::Field`] when a row pools several seasons.
pub fn seasons(m: &crate::matrix::CountMatrix) -> Result<(Vec<String>, Vec<usize>)> {
    let names = m
        .field_values("season")
        .map_err(|cause| WorkflowError::Field {
            option: "--every",
            field: "season".into(),
            cause,
        })?;
    let mut distinct: Vec<(usize, String)> = names.iter().map(|s| season_rank(s)).collect();
    distinct.sort();
    distinct.dedup();
    let codes = names
        .iter()
        .map(|s| {
            distinct
                .binary_search(&season_rank(s))
                .expect("invariant: s is a distinct season")
        })
        .collect();
    Ok((names, codes))
}

/// Chronological rank of a season name within its season year.
fn season_rank(name: &str) -> (usize, String) {
    let r = match name {
        "spring" => 0,
        "summer" => 1,
        "autumn" => 2,
        "winter" => 3,
        _ => 4,
    };
    (r, name.to_string())
}

impl Analysis for Spec {
    const KIND: &'static str = KIND;
    type Outcome = Outcome;

    fn seed(&self) -> Option<u64> {
        Some(self.seed)
    }

    fn run(&self, prepared: &Prepared, progress: &dyn Progress) -> Result<Outcome> {
        let m = &prepared.matrix;
        if prepared.unit() == Unit::Site {
            return Err(WorkflowError::Refused(
                "--unit site pools every year into one row; a trend needs a unit with one period per row"
                    .into(),
            ));
        }
        let n = m.samples.len();
        if n == 0 {
            return Err(WorkflowError::Refused("no rows to analyse".into()));
        }
        self.check_scheme()?;
        let totals = m.totals();
        let mut notes = prepared.notes.clone();
        match self.size_model {
            SizeModel::Geometric => {
                if let Some(i) = totals.iter().position(|t| t.is_nan() || *t <= 0.0) {
                    return Err(WorkflowError::Refused(format!(
                        "row {} has no organisms: ln(abundance) is undefined under the geometric \
                         model; use --size-model rate, which counts rows that caught nothing",
                        m.samples[i].label
                    )));
                }
            }
            SizeModel::Rate if !prepared.selection.keep_empty => {
                return Err(WorkflowError::Refused(
                    "the rate model counts rows that caught nothing, but this selection leaves \
                     them out; prepare it with --keep-empty (trend::resolve does)"
                        .into(),
                ));
            }
            SizeModel::Rate => {}
        }
        let mut year = Vec::with_capacity(n);
        for s in &m.samples {
            if s.year != s.last_year {
                return Err(WorkflowError::Refused(format!(
                    "row {} pools several years; choose a unit with one year per row",
                    s.label
                )));
            }
            year.push(s.year);
        }
        let (season_names, season) = match self.every {
            Every::Year => (None, None),
            Every::Season => {
                let (names, codes) = seasons(m)?;
                (Some(names), Some(codes))
            }
        };
        let sites: Vec<&str> = m.samples.iter().map(|s| s.site.as_str()).collect();
        let site = Grouping::from_labels(&sites).codes().to_vec();
        // A row that caught nothing has no composition: it counts in the size trend
        // and is left out of the shape trend and the composition summaries.
        let keep: Vec<usize> = (0..n).filter(|&i| totals[i] > 0.0).collect();
        if keep.len() < n {
            let empty: Vec<&str> = (0..n)
                .filter(|&i| totals[i] <= 0.0)
                .map(|i| m.samples[i].label.as_str())
                .collect();
            notes.push(format!(
                "{} caught nothing: they count in the size trend and are left out of the \
                 shape trend and the composition summaries, which need a composition ({}{})",
                crate::words::count(empty.len(), "row", "rows"),
                empty.iter().take(5).copied().collect::<Vec<_>>().join(", "),
                if empty.len() > 5 { ", …" } else { "" }
            ));
        }
        let shape_m = m.select_rows(&keep);
        let logs: Vec<f64> = keep.iter().map(|&i| totals[i].ln()).collect();
        let shape = DistanceSpec {
            distance: self.shape_distance.distance(),
            transform: Transform::None,
        }
        .compute(&shape_m)?;
        let combined = self.distance.compute(&shape_m)?;
        let (count, effort) = design::counts_and_effort(m, prepared.selection.per_effort);
        let pick_i32 = |v: &[i32]| -> Vec<i32> { keep.iter().map(|&i| v[i]).collect() };
        let pick = |v: &[usize]| -> Vec<usize> { keep.iter().map(|&i| v[i]).collect() };
        let shape_year = pick_i32(&year);
        let shape_site = pick(&site);
        let shape_season = season.as_deref().map(pick);
        let data = TrendData {
            log_abundance: &logs,
            shape: &shape,
            combined: &combined,
            year: &shape_year,
            season: shape_season.as_deref(),
            site: &shape_site,
            counts: (self.size_model == SizeModel::Rate).then_some(CountData {
                count: &count,
                effort: &effort,
                year: &year,
                season: season.as_deref(),
                site: &site,
            }),
        };
        progress.stage("trend");
        let r = trend(&data, &self.options()).map_err(|e| WorkflowError::kernel("trend", e, m))?;
        progress.finish();
        let name_of: BTreeMap<usize, &str> = match (&season, &season_names) {
            (Some(codes), Some(names)) => codes
                .iter()
                .zip(names)
                .map(|(&c, s)| (c, s.as_str()))
                .collect(),
            _ => BTreeMap::new(),
        };
        let periods = r
            .periods
            .iter()
            .map(|p| {
                let season_name = p
                    .season
                    .and_then(|c| name_of.get(&c))
                    .map(|s| s.to_string());
                let rows: Vec<usize> = (0..n)
                    .filter(|&i| year[i] == p.year && season.as_ref().map(|s| s[i]) == p.season)
                    .collect();
                let first = rows.iter().map(|&i| m.samples[i].first_date.clone()).min();
                let last = rows.iter().map(|&i| m.samples[i].last_date.clone()).max();
                Period {
                    period: match &season_name {
                        Some(s) => format!("{}-{s}", p.year),
                        None => p.year.to_string(),
                    },
                    year: p.year,
                    season: season_name,
                    n: p.n,
                    sites: p.sites,
                    baseline: p.baseline,
                    too_few: p.too_few,
                    n_reference: p.n_reference,
                    abundance: p.abundance,
                    abundance_ci_low: p.ci_low,
                    abundance_ci_high: p.ci_high,
                    change_pct: p.change_pct,
                    shape_distance: p.shape_distance,
                    combined_distance: p.combined_distance,
                    size_part: p.size_part,
                    shape_part: p.shape_part,
                    period_start: first.unwrap_or_default(),
                    period_end: last.unwrap_or_default(),
                }
            })
            .collect();
        let s = &r.size_trend;
        let rate = s.model == SizeModel::Rate;
        notes.extend(r.notes.iter().cloned());
        // The baseline against the later years, taxon by taxon, under the trend's
        // own design: whole years relabelled across all sites at once.
        let all: Vec<usize> = (0..n).collect();
        let side: Vec<usize> = year
            .iter()
            .map(|y| usize::from(!r.baseline_years.contains(y)))
            .collect();
        let year_codes = crate::analysis::trend::YearLabels::new(&year)
            .codes()
            .to_vec();
        let taxa = super::compare::taxa_of(
            m,
            prepared.selection.per_effort,
            &all,
            &side,
            &crate::analysis::size_test::SizeTestOptions {
                permutations: self.permutations,
                seed: self.seed,
                scheme: crate::analysis::permutation::Scheme::WholeSites(year_codes),
                bootstrap: 0,
                reference: 0,
                confidence: 0.95,
                clusters: None,
            },
        )
        .map_err(|e| WorkflowError::kernel("per-taxon tests of the baseline contrast", e, m))?;
        let by_taxon = if self.by_taxon {
            progress.stage("trend: each taxon");
            let t = TaxonTrends::of(
                m,
                prepared.selection.per_effort,
                &year,
                &site,
                season.as_deref(),
                self,
            )?;
            progress.finish();
            Some(t)
        } else {
            None
        };
        Ok(Outcome {
            diagnosis: r.diagnosis,
            alpha: r.alpha,
            size_trend: SizeTrend {
                model: s.model,
                slope_pct_per_year: s.slope_pct_per_year,
                p_value: s.p_value,
                ci_low: s.ci_low,
                ci_high: s.ci_high,
                ci_method: if rate { CI_METHOD_RATE } else { CI_METHOD },
                slope_log: s.slope_log,
                se_ols_log: (!rate).then_some(s.se_log),
                se_quasi_log: rate.then_some(s.se_log),
                dispersion: s.dispersion,
                pseudo_f: s.pseudo_f,
                df_resid: s.df_resid,
            },
            shape_trend: r.shape_trend.clone(),
            decision: Decision {
                size_p: r.size_decision_p,
                shape_p: r.shape_decision_p,
                rule: if r.breakpoints.is_some() {
                    "an aspect changed when min(1, 2 min(p_trend, p_breakpoint)) <= alpha"
                } else {
                    "an aspect changed when p_trend <= alpha"
                },
            },
            breakpoints: r.breakpoints.as_ref().map(|b| Breakpoints {
                size: SizeBreak {
                    year: b.size.year,
                    p_value: b.size.p_value,
                    pseudo_f: b.size.pseudo_f,
                    change_pct: b.size.effect,
                    candidates: b.size.candidates,
                },
                shape: ShapeBreak {
                    year: b.shape.year,
                    p_value: b.shape.p_value,
                    pseudo_f: b.shape.pseudo_f,
                    r2: b.shape.effect,
                    candidates: b.shape.candidates,
                },
            }),
            periods,
            n: r.n,
            years: r.years,
            sites: r.sites,
            baseline_years: r.baseline_years,
            permutations: r.permutations,
            exact: r.exact,
            seed: r.seed,
            scheme: r.scheme,
            smallest_possible_p: r.smallest_possible_p,
            distances: Distances {
                shape: self.shape_distance,
                combined: self.distance.distance,
                transform: self.distance.transform,
            },
            unit: prepared.unit(),
            per_effort: prepared.selection.per_effort,
            fingerprint: prepared.fingerprint(),
            taxa,
            by_taxon,
            taxa_shown: super::compare::TAXA_SHOWN,
            notes,
        })
    }
}

/// The names of the per-period values of a trend run: `period.LABEL.NAME`.
pub const PERIOD_VALUES: [&str; 6] = [
    "abundance",
    "change_pct",
    "shape_distance",
    "size_part",
    "shape_part",
    "n",
];

impl super::Outcome for Outcome {
    fn values(&self) -> Vec<(String, Option<f64>)> {
        let s = &self.size_trend;
        let h = &self.shape_trend;
        let mut vals = vec![
            (
                "size.slope_pct_per_year".to_string(),
                Some(s.slope_pct_per_year),
            ),
            ("size.ci_low".to_string(), Some(s.ci_low)),
            ("size.ci_high".to_string(), Some(s.ci_high)),
            ("size.p_value".to_string(), Some(s.p_value)),
            ("shape.r2".to_string(), Some(h.r2)),
            ("shape.p_value".to_string(), Some(h.p_value)),
            ("decision.size_p".to_string(), Some(self.decision.size_p)),
            ("decision.shape_p".to_string(), Some(self.decision.shape_p)),
        ];
        if let Some(b) = &self.breakpoints {
            vals.push(("breakpoint.size.year".into(), Some(f64::from(b.size.year))));
            vals.push(("breakpoint.size.p_value".into(), Some(b.size.p_value)));
            vals.push((
                "breakpoint.shape.year".into(),
                Some(f64::from(b.shape.year)),
            ));
            vals.push(("breakpoint.shape.p_value".into(), Some(b.shape.p_value)));
        }
        if let Some(t) = &self.by_taxon {
            for x in &t.taxa {
                vals.push((
                    format!("taxon.{}.pct_per_year", x.taxon),
                    x.trend.pct_per_year,
                ));
                vals.push((format!("taxon.{}.p_value", x.taxon), x.trend.p_value));
            }
        }
        for p in &self.periods {
            let of = [
                p.abundance,
                p.change_pct,
                p.shape_distance,
                p.size_part,
                p.shape_part,
                Some(p.n as f64),
            ];
            for (name, v) in PERIOD_VALUES.iter().zip(of) {
                vals.push((format!("period.{}.{name}", p.period), v));
            }
        }
        vals
    }

    fn notes(&self) -> &[String] {
        &self.notes
    }
}

/// The effective selection of the trend `spec`: as [`super::resolve`], except
/// that when neither the flags nor the saved selection name a unit, rows are
/// pooled per site and period (`site-year`, or `site-season` with `every`
/// season), and that rows that caught nothing are kept: the rate model counts
/// them (the shape trend leaves them out with a note) and the geometric model
/// refuses them by name instead of losing them.
///
/// # Errors
/// As [`super::resolve`].
pub fn resolve(
    store: &Store,
    saved: Option<&str>,
    explicit: &Selection,
    spec: &Spec,
) -> Result<Selection> {
    resolve_periods(store, saved, explicit, Some(spec.every))
}

/// The one rule of the analyses that read periods (`trend`, `diversity
/// --every`): as [`super::resolve`], with the rows that caught nothing kept and,
/// when `every` is given and neither the flags nor the saved selection name a
/// unit, rows pooled per site and period ([`Every::unit`]).
///
/// # Errors
/// As [`super::resolve`].
pub fn resolve_periods(
    store: &Store,
    saved: Option<&str>,
    explicit: &Selection,
    every: Option<Every>,
) -> Result<Selection> {
    let mut e = explicit.clone();
    e.keep_empty = true;
    if let Some(every) = every
        && e.unit.is_none()
    {
        let saved_unit = match saved {
            Some(name) => store.selection(name)?.unit,
            None => None,
        };
        if saved_unit.is_none() {
            e.unit = Some(every.unit());
        }
    }
    super::resolve(store, saved, &e)
}

/// The selection of the group `field = value` of `base`: a site split becomes
/// the site filter, a protocol split the protocol filter, a site-attribute split
/// a `site_where` filter (replacing the base's conditions on that key, which
/// the value already satisfies). Other built-in fields cannot be expressed as a
/// selection and are refused.
///
/// # Errors
/// [`WorkflowError::Invalid`] for a built-in field other than `site` and `protocol`.
pub fn group_selection(base: &Selection, field: &str, value: &str) -> Result<Selection> {
    let mut s = base.clone();
    match field {
        "site" => s.sites = vec![value.to_string()],
        "protocol" => s.protocol = Some(value.to_string()),
        f if BUILTIN_FIELDS.contains(&f) => {
            return Err(WorkflowError::Invalid {
                option: "--split-by",
                reason: format!(
                    "{f}: a group of this field cannot be written as a selection, so its run \
                     could not be replayed; split by site, protocol or a site attribute, or run \
                     one trend per selection instead"
                ),
            });
        }
        key => {
            s.site_where.retain(|(k, _)| k != key);
            s.site_where.push((key.to_string(), value.to_string()));
        }
    }
    Ok(s)
}

/// The groups of `field` in the matrix of `base`, each prepared separately from
/// its own selection ([`group_selection`]), in the order of the values.
///
/// # Errors
/// A field that cannot be a selection; an unknown field or one not defined for
/// every row; selection and assembly errors.
pub fn split(store: &Store, base: &Selection, field: &str) -> Result<Vec<(String, Prepared)>> {
    // Refuse an inexpressible field before assembling anything.
    group_selection(base, field, "")?;
    let whole = prepare(store, base)?;
    let mut values = whole
        .matrix
        .field_values(field)
        .map_err(|cause| WorkflowError::Field {
            option: "--split-by",
            field: field.to_string(),
            cause,
        })?;
    values.sort();
    values.dedup();
    values
        .into_iter()
        .map(|v| {
            let p = prepare(store, &group_selection(base, field, &v)?)?;
            Ok((v, p))
        })
        .collect()
}

/// The dates of a stored period, read back from a stored trend result.
#[derive(Deserialize)]
struct StoredPeriod {
    period: String,
    period_start: String,
    period_end: String,
}

#[derive(Deserialize)]
struct StoredPeriods {
    periods: Vec<StoredPeriod>,
}

/// A per-period value (`abundance`, `size_part`…, see [`PERIOD_VALUES`])
/// across every stored trend run and every period of each, dated by the
/// period's first and last event and ordered by them: the series
/// `runs series --kind trend --value NAME` lists. Only runs stored on
/// `selection` when given.
///
/// # Errors
/// SQLite errors.
pub fn period_series(
    store: &Store,
    value: &str,
    selection: Option<&serde_json::Value>,
) -> Result<Vec<SeriesPoint>> {
    let mut out = Vec::new();
    for r in store.runs(Some(KIND))? {
        if selection.is_some_and(|s| *s != r.selection) {
            continue;
        }
        let dates: BTreeMap<String, (String, String)> =
            serde_json::from_value::<StoredPeriods>(r.result.clone())
                .map(|s| {
                    s.periods
                        .into_iter()
                        .map(|p| (p.period, (p.period_start, p.period_end)))
                        .collect()
                })
                .unwrap_or_default();
        for (name, v) in &r.values {
            let Some((label, what)) = period_value(name) else {
                continue;
            };
            if what != value {
                continue;
            }
            let (start, end) = dates.get(label).cloned().unzip();
            out.push(SeriesPoint {
                run_id: r.id,
                period_start: start,
                period_end: end,
                created_at: r.created_at.clone(),
                value: *v,
            });
        }
    }
    super::runs::sort_by_period(&mut out);
    Ok(out)
}

/// A stored per-period value name split into its period label and value
/// (`period.2016.size_part` → `("2016", "size_part")`); `None` for other names.
pub fn period_value(name: &str) -> Option<(&str, &str)> {
    name.strip_prefix("period.")
        .and_then(|n| n.rsplit_once('.'))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn breakpoints_and_every_parse() {
        assert_eq!(parse_breakpoint("auto"), Ok(BreakpointSpec::Auto));
        assert_eq!(parse_breakpoint("AUTO"), Ok(BreakpointSpec::Auto));
        assert_eq!(parse_breakpoint("2016"), Ok(BreakpointSpec::Year(2016)));
        assert!(parse_breakpoint("soon").is_err());
        assert_eq!(Every::Season.unit(), Unit::SiteSeason);
        for e in Every::ALL {
            assert_eq!(
                serde_json::to_value(e).unwrap(),
                serde_json::json!(e.name())
            );
        }
    }

    #[test]
    fn a_spec_round_trips_through_its_stored_form() {
        let mut spec = Spec::new(99, 7);
        spec.baseline = Some((2008, 2010));
        spec.breakpoint = Some(BreakpointSpec::Year(2016));
        spec.every = Every::Season;
        spec.shape_distance = ShapeDistance::ChiSquare;
        let stored = serde_json::to_value(super::super::AnalysisSpec::from(spec.clone())).unwrap();
        assert_eq!(stored["kind"], "trend");
        assert_eq!(stored["distance"], "bray-curtis");
        match serde_json::from_value(stored).unwrap() {
            super::super::AnalysisSpec::Trend(s) => assert_eq!(s, spec),
            other => panic!("{other:?}"),
        }
    }

    #[test]
    fn groups_become_selections_or_are_refused() {
        let base = Selection {
            site_where: vec![
                ("reach".into(), "lower".into()),
                ("reach".into(), "upper".into()),
            ],
            sites: vec!["S01".into(), "S02".into()],
            ..Selection::default()
        };
        let g = group_selection(&base, "reach", "upper").unwrap();
        assert_eq!(
            g.site_where,
            vec![("reach".to_string(), "upper".to_string())]
        );
        assert_eq!(g.sites, base.sites);
        let g = group_selection(&base, "site", "S02").unwrap();
        assert_eq!(g.sites, vec!["S02".to_string()]);
        assert_eq!(g.site_where, base.site_where);
        let g = group_selection(&base, "protocol", "kick").unwrap();
        assert_eq!(g.protocol.as_deref(), Some("kick"));
        for f in ["year", "season", "label", "effort"] {
            let e = group_selection(&base, f, "x").unwrap_err().to_string();
            assert!(e.contains("--split-by") && e.contains("replayed"), "{e}");
        }
    }
}
