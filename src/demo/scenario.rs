//! The demo's analyses as data: which selection each one runs on and its
//! typed spec, built from the generator's constants ([`super::generate`]) so
//! that the periods compared are the periods the stories were invented with.
//! [`run`] prepares and runs them on a demo store; [`Ran::to_save`] lists
//! every run to store (in one `runs::save`), and [`Ran::analysis`] turns the
//! outcomes into the findings the demo prints and the input of its report.

use crate::analysis::trend::BreakpointSpec;
use crate::matrix::Unit;
use crate::report::html::{Labelled, Part, ReportInput};
use crate::report::input::ordination_part;
use crate::report::svg::{TotalsGroup, TotalsMeasure, TotalsPlot};
use crate::store::{Selection, Store};
use crate::workflow::design::{DistanceSpec, Periods};
use crate::workflow::ordinate::{self, Method};
use crate::workflow::report::{Diversities, Trends, periods_flag};
use crate::workflow::runs::ToSave;
use crate::workflow::summary::{self, Summary};
use crate::workflow::{
    Analysis, Prepared, Result, Silent, WorkflowError, compare, diversity, partition, prepare,
    resolve, trend,
};

use super::generate::{FIRST_YEAR, LAST_YEAR, LOWER_DECLINE_FROM};

/// Seed of every random stream the demo analyses use.
pub const SEED: u64 = 20_080_415;
/// Permutations of the demo's tests.
pub const PERMUTATIONS: usize = 999;
/// The before/after periods of the demo's stories: up to the year before the
/// lower reach declines, and from then on.
pub const PERIODS: [(i32, i32); 2] = [
    (FIRST_YEAR, LOWER_DECLINE_FROM - 1),
    (LOWER_DECLINE_FROM, LAST_YEAR),
];
/// The reaches of the demo, downstream first.
pub const REACHES: [&str; 3] = ["lower", "middle", "upper"];
/// The field the trends are split by.
pub const SPLIT_BY: &str = "reach";

/// The periods as the workflow takes them.
pub fn periods() -> Periods {
    Periods(PERIODS.to_vec())
}

/// The periods written as `A–B against C–D`.
pub fn periods_text() -> String {
    let [(a, b), (c, d)] = PERIODS;
    format!("{a}–{b} against {c}–{d}")
}

/// Kick samples per minute of kicking, pooled per site and year.
pub fn kick_site_years() -> Selection {
    Selection {
        protocol: Some("kick".into()),
        per_effort: true,
        unit: Some(Unit::SiteYear),
        ..Selection::default()
    }
}

/// The analyses of one reach.
#[derive(Debug, Clone)]
pub struct ReachAnalyses {
    /// Reach name.
    pub reach: String,
    /// Its kick samples ([`kick_site_years`] of the reach).
    pub selection: Selection,
    /// Samples by period (correspondence analysis).
    pub ca: ordinate::Spec,
    /// Composition against the period (CCA and its permutation test).
    pub cca: ordinate::Spec,
    /// Size and shape, period against period.
    pub compare: compare::Spec,
}

impl ReachAnalyses {
    /// The heading of the reach (`lower reach`).
    pub fn label(&self) -> String {
        format!("{} reach", self.reach)
    }
}

/// Every analysis of the demo.
#[derive(Debug, Clone)]
pub struct Scenario {
    /// Per reach.
    pub reaches: Vec<ReachAnalyses>,
    /// The five-way size/shape partition of every kick sample.
    pub partition: (Selection, partition::Spec),
    /// The trends of every kick sample, split by [`SPLIT_BY`].
    pub trends: (Selection, trend::Spec),
    /// Diversity through the years of the kick samples (raw counts), split by
    /// [`SPLIT_BY`].
    pub diversity: (Selection, diversity::Spec),
}

/// The demo's analyses, from the generator's constants.
pub fn scenario() -> Scenario {
    let reaches = REACHES
        .iter()
        .map(|reach| {
            let ca = ordinate::Spec {
                method: Method::Ca,
                by: None,
                periods: Some(periods()),
                constraints: Vec::new(),
                axes: 2,
                distance: DistanceSpec::default(),
                permutations: PERMUTATIONS,
                seed: None,
            };
            let cca = ordinate::Spec {
                method: Method::Cca,
                constraints: vec!["period".into()],
                seed: Some(SEED),
                ..ca.clone()
            };
            let mut compare = compare::Spec::new("period", PERMUTATIONS, SEED);
            compare.periods = Some(periods());
            ReachAnalyses {
                reach: reach.to_string(),
                selection: Selection {
                    site_where: vec![("reach".into(), reach.to_string())],
                    ..kick_site_years()
                },
                ca,
                cca,
                compare,
            }
        })
        .collect();
    let mut t = trend::Spec::new(PERMUTATIONS, SEED);
    t.breakpoint = Some(BreakpointSpec::Auto);
    Scenario {
        reaches,
        partition: (
            kick_site_years(),
            partition::Spec::compared(PERMUTATIONS, SEED),
        ),
        trends: (kick_site_years(), t),
        diversity: (
            Selection {
                per_effort: false,
                ..kick_site_years()
            },
            {
                let mut d = diversity::Spec::new(PERMUTATIONS, SEED);
                d.every = Some(trend::Every::Year);
                d
            },
        ),
    }
}

/// The outcomes of one reach.
#[derive(Debug, Clone)]
pub struct ReachRun {
    /// What was run.
    pub analyses: ReachAnalyses,
    /// The reach's prepared selection.
    pub prepared: Prepared,
    /// Samples by period.
    pub ca: ordinate::Outcome,
    /// Composition against the period.
    pub cca: ordinate::Outcome,
    /// Size and shape.
    pub compare: compare::Outcome,
}

/// Every outcome of the demo.
#[derive(Debug, Clone)]
pub struct Ran {
    /// What the store holds.
    pub summary: Summary,
    /// Per reach.
    pub reaches: Vec<ReachRun>,
    /// The partition: prepared data, spec, outcome.
    pub partition: (Prepared, partition::Spec, partition::Outcome),
    /// The trends, one per reach.
    pub trends: Trends,
    /// Diversity through the years, one per reach.
    pub diversity: Diversities,
}

/// Prepare and run the demo's analyses on a demo store (nothing is stored).
///
/// # Errors
/// Selection and kernel errors (the demo data is checked by the test suite).
pub fn run(store: &Store) -> Result<Ran> {
    let s = scenario();
    let mut reaches = Vec::new();
    for a in s.reaches {
        let prepared = prepare(store, &resolve(store, None, &a.selection)?)?;
        reaches.push(ReachRun {
            ca: a.ca.run(&prepared, &Silent)?,
            cca: a.cca.run(&prepared, &Silent)?,
            compare: a.compare.run(&prepared, &Silent)?,
            analyses: a,
            prepared,
        });
    }
    let (sel, spec) = s.partition;
    let prepared = prepare(store, &resolve(store, None, &sel)?)?;
    let outcome = spec.run(&prepared, &Silent)?;
    let (sel, t) = s.trends;
    let base = trend::resolve(store, None, &sel, &t)?;
    let parts = trend::split(store, &base, SPLIT_BY)?;
    let split = t.run_split(SPLIT_BY, &parts, &Silent)?;
    let trends = Trends {
        field: SPLIT_BY.to_string(),
        command: format!(
            "tally trend {} --every year --split-by {SPLIT_BY} --breakpoint auto --permutations {PERMUTATIONS} --seed {SEED}",
            base.to_flags()
        ),
        spec: t,
        parts,
        split,
    };
    let (sel, d) = s.diversity;
    let diversity = Diversities::run(store, None, &sel, SPLIT_BY, d, &Silent)?;
    Ok(Ran {
        summary: summary::summary(store)?,
        reaches,
        partition: (prepared, spec, outcome),
        trends,
        diversity,
    })
}

/// What the demo found for one reach.
#[derive(Debug, Clone)]
pub struct ReachFinding {
    /// Reach name.
    pub reach: String,
    /// Geometric mean of per-minute totals, second period over first (descriptive).
    pub totals_ratio: f64,
    /// CCA permutation p-value of composition against the period.
    pub composition_p: f64,
    /// Stored run of that test.
    pub run_id: Option<i64>,
    /// The verdict of `tally compare` (the first period against the second).
    pub verdict: String,
    /// Stored run of that comparison.
    pub compare_run_id: Option<i64>,
    /// The diagnosis of `tally trend` for the reach (abundance, composition, both, none).
    pub diagnosis: String,
    /// The reading of `tally diversity --every year` for the reach, in words.
    pub diversity: String,
}

/// The demo's analyses: the report input and the findings per reach.
#[derive(Debug, Clone)]
pub struct DemoAnalysis {
    /// Everything the report shows.
    pub report: ReportInput,
    /// One finding per reach (lower, middle, upper).
    pub reaches: Vec<ReachFinding>,
}

fn geometric_mean(v: &[f64]) -> f64 {
    (v.iter().map(|x| x.ln()).sum::<f64>() / v.len() as f64).exp()
}

impl Ran {
    /// Every run of the demo, in the order [`Ran::analysis`] reads their ids:
    /// the composition test of each reach, the comparison of each reach, the
    /// partition, the trend of each reach, the diversity of each reach.
    ///
    /// # Errors
    /// Serialisation errors.
    pub fn to_save(&self) -> Result<Vec<ToSave<'_>>> {
        let mut v = Vec::new();
        for r in &self.reaches {
            v.push(ToSave::new(&r.prepared, &r.analyses.cca, &r.cca)?);
        }
        for r in &self.reaches {
            v.push(ToSave::new(&r.prepared, &r.analyses.compare, &r.compare)?);
        }
        let (prepared, spec, outcome) = &self.partition;
        v.push(ToSave::new(prepared, spec, outcome)?);
        let t = &self.trends;
        v.extend(t.split.to_save(&t.spec, &t.parts)?);
        v.extend(self.diversity.to_save()?);
        Ok(v)
    }

    /// The findings and the report input; `ids` are the stored run ids in
    /// the order of [`Ran::to_save`] (empty when nothing was stored).
    ///
    /// # Errors
    /// A CCA outcome without its test (an invariant).
    pub fn analysis(&self, ids: &[i64]) -> Result<DemoAnalysis> {
        let id = |i: usize| ids.get(i).copied();
        let n = self.reaches.len();
        let permutations = format!("--permutations {PERMUTATIONS} --seed {SEED}");
        let pf = periods_flag(Some(&periods()));
        let mut run_ids = Vec::new();
        let mut parameters = vec![("store summary".to_string(), "tally summary".to_string())];
        let mut ordination = Vec::new();
        let mut boxes = Vec::new();
        let mut compare = Vec::new();
        let mut reaches = Vec::new();
        let split = &self.trends.split;
        for (i, r) in self.reaches.iter().enumerate() {
            let label = r.analyses.label();
            let flags = r.prepared.selection.to_flags();
            let test = &r
                .cca
                .cca()
                .ok_or_else(|| WorkflowError::Refused("invariant: a CCA carries its test".into()))?
                .test;
            parameters.push((
                format!("{label}: ordination"),
                format!("tally ordinate {flags} --method ca{pf}"),
            ));
            parameters.push((
                format!("{label}: composition test"),
                format!(
                    "tally ordinate {flags} --method cca --constraint period{pf} {permutations}"
                ),
            ));
            parameters.push((
                format!("{label}: size and shape comparison"),
                format!("tally compare {flags}{pf} --by period {permutations}"),
            ));
            if let Some(id) = id(i) {
                run_ids.push((format!("{label}: composition test"), id));
            }
            if let Some(id) = id(n + i) {
                run_ids.push((format!("{label}: size and shape comparison"), id));
            }
            if let Some(p) =
                ordination_part(&r.ca, &format!("{label}: samples by period"), Some(&r.cca))
            {
                ordination.push(p);
            }
            let mut means = Vec::new();
            for (group, values) in crate::report::input::totals_of(&r.ca) {
                means.push(geometric_mean(&values));
                boxes.push(TotalsGroup {
                    name: format!("{} {group}", r.analyses.reach),
                    values,
                });
            }
            compare.push(Labelled {
                label: label.clone(),
                outcome: r.compare.clone(),
            });
            reaches.push(ReachFinding {
                reach: r.analyses.reach.clone(),
                totals_ratio: means[1] / means[0],
                composition_p: test.p_value,
                run_id: id(i),
                verdict: r.compare.verdict.clone(),
                compare_run_id: id(n + i),
                diagnosis: split
                    .groups
                    .iter()
                    .find(|g| g.group == r.analyses.reach)
                    .map(|g| g.outcome.diagnosis.name().to_string())
                    .unwrap_or_default(),
                diversity: self
                    .diversity
                    .parts
                    .iter()
                    .zip(&self.diversity.outcomes)
                    .find(|((g, _), _)| *g == r.analyses.reach)
                    .and_then(|(_, o)| crate::report::text::diversity::reading_line(o))
                    .unwrap_or_default(),
            });
        }
        let (prepared, _, outcome) = &self.partition;
        parameters.push((
            "size/shape partition".to_string(),
            format!(
                "tally partition {} --compare-distances {permutations}",
                prepared.selection.to_flags()
            ),
        ));
        if let Some(id) = id(2 * n) {
            run_ids.push(("size/shape partition".to_string(), id));
        }
        parameters.push(("trends".to_string(), self.trends.command.clone()));
        for k in 0..self.trends.parts.len() {
            if let Some(id) = id(2 * n + 1 + k) {
                run_ids.push(("trends".to_string(), id));
            }
        }
        let first_diversity = 2 * n + 1 + self.trends.parts.len();
        for (k, (label, command)) in self
            .diversity
            .labels()
            .into_iter()
            .zip(&self.diversity.commands)
            .enumerate()
        {
            parameters.push((label.clone(), command.clone()));
            if let Some(id) = id(first_diversity + k) {
                run_ids.push((label, id));
            }
        }
        let ((a, _), (c, _)) = (PERIODS[0], PERIODS[1]);
        Ok(DemoAnalysis {
            report: ReportInput {
                title: "Wren Valley river monitoring (invented demo data)".into(),
                selection_text: format!(
                    "Kick samples per minute of kicking, pooled per site and year, {a}–{LAST_YEAR}; before {c} and from {c} on"
                ),
                summary: self.summary.clone(),
                compare: Part::Done(compare),
                partition: Part::Done(outcome.clone()),
                ordination: Part::Done(ordination),
                totals: Part::Done(TotalsPlot {
                    title: "Organisms per minute, by reach and period".into(),
                    subtitle: "kick samples pooled per site and year, per minute of kicking"
                        .into(),
                    measure: TotalsMeasure::PerEffort {
                        unit: "minute".into(),
                    },
                    groups: boxes,
                }),
                trends: Part::Done(split.groups.clone()),
                diversity: Part::Done(crate::report::input::diversity_groups(&self.diversity)),
                run_ids,
                parameters,
                cautions: vec!["All data in this report is invented (the Wren Valley demo); it illustrates the tool and says nothing about any real river.".into()],
            },
            reaches,
        })
    }
}
