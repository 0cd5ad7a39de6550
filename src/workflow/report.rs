//! The analyses of `tally report`, as one workflow: the selection is prepared
//! once, then the correspondence analysis ([`ordinate`]), the size and shape
//! comparison ([`compare`]) and the five-way partition ([`partition`]) with
//! `by`, and the trends ([`trend::split`]) and diversity through the years
//! ([`Diversities`]) with `split_by`. Each part keeps its
//! prepared data, its spec, its outcome and the command line that computes the
//! same numbers on its own (`--seed` and `--permutations` included), so the
//! report can show where every number comes from and `runs verify` can replay
//! every stored run.

use crate::analysis::trend::BreakpointSpec;
use crate::store::{Selection, Store};

use super::design::{DistanceSpec, Periods, PermuteDesign};
use super::ordinate::{self, Method};
use super::runs::ToSave;
use super::summary::{self, Summary};
use super::{
    Analysis, AnalysisSpec, Prepared, Progress, Result, WorkflowError, command, compare, diversity,
    partition, prepare,
};
use super::{resolve, trend};

/// What the report is of.
#[derive(Debug, Clone, PartialEq)]
pub struct Spec {
    /// The saved selection the flags apply over, if any.
    pub saved: Option<String>,
    /// The selection flags given explicitly.
    pub selection: Selection,
    /// Compare the groups of this field (CA, comparison, partition).
    pub by: Option<String>,
    /// Follow each group of this field across the years (trends).
    pub split_by: Option<String>,
    /// Year ranges defining the field `period`.
    pub periods: Option<Periods>,
    /// How rows move in the tests of the comparison and the partition
    /// (`--permute`); the trends relabel whole years, a within-sites design, and
    /// refuse `free` and `whole-sites`.
    pub permute: PermuteDesign,
    /// Permute the comparison and the partition only within the levels of this field.
    pub strata: Option<String>,
    /// Random permutations of every test.
    pub permutations: usize,
    /// Seed of every random stream.
    pub seed: u64,
}

/// One analysis of the report: its spec, its outcome and the command line
/// that computes the same outcome.
#[derive(Debug, Clone)]
pub struct Done<S: Analysis> {
    /// The spec.
    pub spec: S,
    /// The outcome.
    pub outcome: S::Outcome,
    /// The equivalent `tally …` command line.
    pub command: String,
}

/// The trends of the report: one per group of `field`, each on its own selection.
#[derive(Debug, Clone)]
pub struct Trends {
    /// The field split by.
    pub field: String,
    /// The spec shared by every group.
    pub spec: trend::Spec,
    /// The prepared data of each group, in order.
    pub parts: Vec<(String, Prepared)>,
    /// The outcome of each group.
    pub split: trend::Split,
    /// The equivalent `tally trend …` command line.
    pub command: String,
}

/// Diversity through the years of each group of `field`: `tally diversity
/// --every year` on each group's own selection (raw counts: a `--per-effort`
/// selection is taken without it, since diversity counts individuals).
#[derive(Debug, Clone)]
pub struct Diversities {
    /// The field split by.
    pub field: String,
    /// The spec shared by every group.
    pub spec: diversity::Spec,
    /// The prepared data of each group, in order.
    pub parts: Vec<(String, Prepared)>,
    /// The outcome of each group, in the same order.
    pub outcomes: Vec<diversity::Outcome>,
    /// The equivalent command line of each group.
    pub commands: Vec<String>,
}

impl Diversities {
    /// Run `spec` on each group of `field` of the selection `selection` (over the
    /// saved selection `saved`).
    ///
    /// # Errors
    /// Selection, field and analysis errors.
    pub fn run(
        store: &Store,
        saved: Option<&str>,
        selection: &Selection,
        field: &str,
        spec: diversity::Spec,
        progress: &dyn Progress,
    ) -> Result<Diversities> {
        let mut raw = selection.clone();
        raw.per_effort = false;
        let mut base = diversity::resolve(store, saved, &raw, &spec)?;
        base.per_effort = false;
        let parts = trend::split(store, &base, field)?;
        let mut outcomes = Vec::with_capacity(parts.len());
        let mut commands = Vec::with_capacity(parts.len());
        for (_, p) in &parts {
            outcomes.push(spec.run(p, progress)?);
            commands.push(
                command::command_line(&AnalysisSpec::Diversity(spec.clone()), &p.selection).0,
            );
        }
        Ok(Diversities {
            field: field.to_string(),
            spec,
            parts,
            outcomes,
            commands,
        })
    }

    /// The runs to store, one per group.
    ///
    /// # Errors
    /// Serialisation errors.
    pub fn to_save(&self) -> Result<Vec<ToSave<'_>>> {
        self.parts
            .iter()
            .zip(&self.outcomes)
            .map(|((_, p), o)| ToSave::new(p, &self.spec, o))
            .collect()
    }

    /// The provenance label of each group's part.
    pub fn labels(&self) -> Vec<String> {
        self.parts
            .iter()
            .map(|(g, _)| label::diversity(&self.field, g))
            .collect()
    }
}

/// Everything the report computed.
#[derive(Debug, Clone)]
pub struct Report {
    /// What was asked for.
    pub spec: Spec,
    /// The field of the ordination (`by`, else `split_by`).
    pub field: String,
    /// What the store holds.
    pub summary: Summary,
    /// The prepared selection of the ordination, the comparison and the partition.
    pub prepared: Prepared,
    /// The correspondence analysis by `field`.
    pub ordination: Done<ordinate::Spec>,
    /// The comparison by `by`.
    pub compare: Option<Done<compare::Spec>>,
    /// The prepared selection of the comparison: the report's, with the rows that
    /// caught nothing kept for the rate model ([`compare::Spec::selection`]).
    pub compare_prepared: Option<Prepared>,
    /// The five-way size/shape partition (with `by`).
    pub partition: Option<Done<partition::Spec>>,
    /// The trends by `split_by`.
    pub trends: Option<Trends>,
    /// Diversity through the years by `split_by`.
    pub diversity: Option<Diversities>,
}

/// Labels of the report's parts, shared by its provenance rows and run ids.
pub mod label {
    /// The store summary.
    pub const SUMMARY: &str = "store summary";
    /// The correspondence analysis.
    pub const ORDINATION: &str = "ordination";
    /// The size/shape partition.
    pub const PARTITION: &str = "size/shape partition";
    /// The trends.
    pub const TRENDS: &str = "trends";

    /// The comparison by `by`.
    pub fn comparison(by: &str) -> String {
        format!("comparison by {by}")
    }

    /// The diversity of the group `group` of `field`.
    pub fn diversity(field: &str, group: &str) -> String {
        format!("diversity: {field} = {group}")
    }
}

/// `--periods A..B,C..D`, with a leading space (empty without periods).
pub fn periods_flag(periods: Option<&Periods>) -> String {
    periods
        .map(|p| {
            format!(
                " --periods {}",
                p.0.iter()
                    .map(|(a, b)| format!("{a}..{b}"))
                    .collect::<Vec<_>>()
                    .join(",")
            )
        })
        .unwrap_or_default()
}

impl Report {
    /// The runs to store, in the order of [`Report::stored_parts`]: the
    /// comparison, the partition, then one trend per group.
    ///
    /// # Errors
    /// Serialisation errors.
    pub fn to_save(&self) -> Result<Vec<ToSave<'_>>> {
        let mut v = Vec::new();
        if let (Some(c), Some(p)) = (&self.compare, &self.compare_prepared) {
            v.push(ToSave::new(p, &c.spec, &c.outcome)?);
        }
        if let Some(p) = &self.partition {
            v.push(ToSave::new(&self.prepared, &p.spec, &p.outcome)?);
        }
        if let Some(t) = &self.trends {
            v.extend(t.split.to_save(&t.spec, &t.parts)?);
        }
        if let Some(d) = &self.diversity {
            v.extend(d.to_save()?);
        }
        Ok(v)
    }

    /// The part each run of [`Report::to_save`] belongs to, in the same order.
    pub fn stored_parts(&self) -> Vec<String> {
        let mut v = Vec::new();
        if let Some(c) = &self.compare {
            v.push(label::comparison(&c.spec.by));
        }
        if self.partition.is_some() {
            v.push(label::PARTITION.to_string());
        }
        if let Some(t) = &self.trends {
            v.extend(t.parts.iter().map(|_| label::TRENDS.to_string()));
        }
        if let Some(d) = &self.diversity {
            v.extend(d.labels());
        }
        v
    }

    /// How each part was obtained: (part, equivalent command line).
    pub fn commands(&self) -> Vec<(String, String)> {
        let mut v = vec![
            (label::SUMMARY.to_string(), "tally summary".to_string()),
            (
                label::ORDINATION.to_string(),
                self.ordination.command.clone(),
            ),
        ];
        if let Some(c) = &self.compare {
            v.push((label::comparison(&c.spec.by), c.command.clone()));
        }
        if let Some(p) = &self.partition {
            v.push((label::PARTITION.to_string(), p.command.clone()));
        }
        if let Some(t) = &self.trends {
            v.push((label::TRENDS.to_string(), t.command.clone()));
        }
        if let Some(d) = &self.diversity {
            v.extend(d.labels().into_iter().zip(d.commands.iter().cloned()));
        }
        v
    }
}

/// Run the report's analyses.
///
/// # Errors
/// [`WorkflowError::Invalid`] without `by` and `split_by`; selection, field and
/// analysis errors of every part; SQLite errors.
pub fn run(store: &Store, spec: &Spec, progress: &dyn Progress) -> Result<Report> {
    let field = spec
        .by
        .clone()
        .or_else(|| spec.split_by.clone())
        .ok_or_else(|| WorkflowError::Invalid {
            option: "--by",
            reason: "--by or --split-by is required".to_string(),
        })?;
    let summary = summary::summary(store)?;
    let prepared = prepare(
        store,
        &resolve(store, spec.saved.as_deref(), &spec.selection)?,
    )?;
    let flags = prepared.selection.to_flags();
    let periods = periods_flag(spec.periods.as_ref());
    let (p, s) = (spec.permutations, spec.seed);
    // The periods of the ordination are applied by the one periods rule
    // (`Periods::apply`), as in the comparison.
    let ca = ordinate::Spec {
        method: Method::Ca,
        by: Some(field.clone()),
        periods: spec.periods.clone(),
        constraints: Vec::new(),
        axes: 2,
        distance: DistanceSpec::default(),
        permutations: p,
        seed: None,
    };
    let ordination = Done {
        outcome: ca.run(&prepared, progress)?,
        spec: ca,
        // A correspondence analysis draws no random numbers: no seed.
        command: format!("tally ordinate {flags} --method ca --by {field}{periods}"),
    };
    let design = design_flags(spec);
    let (compare, compare_prepared, partition) = match &spec.by {
        Some(by) => {
            let mut c = compare::Spec::new(by.clone(), p, s);
            c.periods = spec.periods.clone();
            c.scheme = spec.permute;
            c.strata = spec.strata.clone();
            let sel = c.selection(&prepared.selection);
            let cp = if sel == prepared.selection {
                prepared.clone()
            } else {
                prepare(store, &sel)?
            };
            let mut pa = partition::Spec::compared(p, s);
            pa.scheme = spec.permute;
            pa.strata = spec.strata.clone();
            (
                Some(Done {
                    outcome: c.run(&cp, progress)?,
                    spec: c,
                    command: format!(
                        "tally compare {} --by {by}{periods}{design} --permutations {p} --seed {s}",
                        cp.selection.to_flags()
                    ),
                }),
                Some(cp),
                Some(Done {
                    outcome: pa.run(&prepared, progress)?,
                    spec: pa,
                    command: format!(
                        "tally partition {flags} --compare-distances{design} --permutations {p} --seed {s}"
                    ),
                }),
            )
        }
        None => (None, None, None),
    };
    let trends = match &spec.split_by {
        Some(split_by) => Some(trends(store, spec, split_by, progress)?),
        None => None,
    };
    let diversity = match &spec.split_by {
        Some(split_by) => {
            let mut d = diversity::Spec::new(spec.permutations, spec.seed);
            d.every = Some(trend::Every::Year);
            Some(Diversities::run(
                store,
                spec.saved.as_deref(),
                &spec.selection,
                split_by,
                d,
                progress,
            )?)
        }
        None => None,
    };
    Ok(Report {
        spec: spec.clone(),
        field,
        summary,
        prepared,
        ordination,
        compare,
        compare_prepared,
        partition,
        trends,
        diversity,
    })
}

/// ` --permute X` (unless `auto`) and ` --strata F` of the report's tests of the
/// comparison and the partition, for their equivalent command lines.
fn design_flags(spec: &Spec) -> String {
    let mut f = String::new();
    if spec.permute != PermuteDesign::Auto {
        f.push_str(&format!(" --permute {}", spec.permute.as_str()));
    }
    if let Some(strata) = &spec.strata {
        f.push_str(&format!(" --strata {strata}"));
    }
    f
}

/// The trends of the report: `tally trend --split-by FIELD --every year
/// --breakpoint auto` on the report's selection (rows pooled per site and year
/// unless a unit is given), one run per group.
fn trends(store: &Store, spec: &Spec, field: &str, progress: &dyn Progress) -> Result<Trends> {
    let mut t = trend::Spec::new(spec.permutations, spec.seed);
    t.breakpoint = Some(BreakpointSpec::Auto);
    t.scheme = spec.permute;
    let base = trend::resolve(store, spec.saved.as_deref(), &spec.selection, &t)?;
    let parts = trend::split(store, &base, field)?;
    let split = t.run_split(field, &parts, progress)?;
    Ok(Trends {
        field: field.to_string(),
        command: format!(
            "tally trend {} --every year --split-by {field} --breakpoint auto{} --permutations {} --seed {}",
            base.to_flags(),
            if spec.permute == PermuteDesign::Auto {
                String::new()
            } else {
                format!(" --permute {}", spec.permute.as_str())
            },
            spec.permutations,
            spec.seed
        ),
        spec: t,
        parts,
        split,
    })
}
