//! The equivalent command line of a stored run: the `tally …` words that, run on
//! the same store, recompute the run from its stored selection and spec (the
//! seed and the permutations included). Every choice of the spec is written out,
//! defaults too, so the line does not depend on what the defaults are when it is
//! read. `runs show` prints it beside the run; `runs verify` replays the spec
//! itself, in process.
//!
//! A spec stored before a choice existed replays under that choice's old value,
//! which a flag may not be able to express (an `impact` run stored before the
//! site bootstrap has a Wald interval); [`command_line`] then says so.

use serde::Serialize;

use crate::store::Selection;

use super::design::{DistanceSpec, Periods};
use super::{AnalysisSpec, partition};

/// The stable name serde gives a unit enum value (`"sequential"`, `"log-total"`…).
fn name_of<T: Serialize>(v: &T) -> String {
    match serde_json::to_value(v) {
        Ok(serde_json::Value::String(s)) => s,
        other => panic!("invariant: a unit enum serialises as a string, got {other:?}"),
    }
}

/// The words of one command, built flag by flag.
struct Line(Vec<String>);

impl Line {
    fn new(command: &str, selection: &Selection) -> Line {
        let mut w = vec!["tally".to_string(), command.to_string()];
        let flags = selection.to_flags();
        if !flags.is_empty() {
            w.push(flags);
        }
        Line(w)
    }

    fn flag(&mut self, name: &str, value: impl std::fmt::Display) -> &mut Line {
        self.0.push(format!("--{name} {value}"));
        self
    }

    fn switch(&mut self, name: &str, on: bool) -> &mut Line {
        if on {
            self.0.push(format!("--{name}"));
        }
        self
    }

    fn opt<T: std::fmt::Display>(&mut self, name: &str, value: Option<T>) -> &mut Line {
        if let Some(v) = value {
            self.flag(name, v);
        }
        self
    }

    fn distance(&mut self, d: &DistanceSpec) -> &mut Line {
        self.flag("distance", d.distance.name())
            .flag("transform", d.transform.name())
    }

    fn periods(&mut self, p: Option<&Periods>) -> &mut Line {
        self.opt(
            "periods",
            p.map(|p| {
                p.0.iter()
                    .map(|(a, b)| format!("{a}..{b}"))
                    .collect::<Vec<_>>()
                    .join(",")
            }),
        )
    }

    fn run(&mut self, permutations: usize, seed: Option<u64>) -> String {
        self.flag("permutations", permutations);
        if let Some(s) = seed {
            self.flag("seed", s);
        }
        self.0.join(" ")
    }
}

/// The equivalent command line of a run of `spec` on `selection`, and, when the
/// spec holds a choice no flag expresses, why the line differs from the run.
pub fn command_line(spec: &AnalysisSpec, selection: &Selection) -> (String, Option<String>) {
    match spec {
        AnalysisSpec::Permanova(s) => {
            let mut l = Line::new("permanova", selection);
            l.flag("by", &s.by);
            for c in &s.covariates {
                l.flag("covariate", c);
            }
            l.flag("permute", s.scheme.as_str())
                .opt("strata", s.strata.as_deref())
                .switch("pairwise", s.pairwise)
                .flag("ss", name_of(&s.ss))
                .distance(&s.distance);
            (l.run(s.permutations, Some(s.seed)), None)
        }
        AnalysisSpec::Dispersion(s) => {
            let mut l = Line::new("dispersion", selection);
            l.flag("by", &s.by)
                .flag("permute", s.scheme.as_str())
                .opt("strata", s.strata.as_deref())
                .switch("pairwise", s.pairwise)
                .flag("null", name_of(&s.permute))
                .distance(&s.distance);
            (l.run(s.permutations, Some(s.seed)), None)
        }
        AnalysisSpec::Compare(s) => {
            let mut l = Line::new("compare", selection);
            l.flag("by", &s.by)
                .flag("permute", s.scheme.as_str())
                .opt("strata", s.strata.as_deref())
                .flag("size-model", s.size_model.as_str())
                .opt("reference", s.reference.as_deref())
                .periods(s.periods.as_ref())
                .flag("shape-distance", s.shape_distance.name());
            if let Some(r) = &s.rarefy {
                match r.depth {
                    super::compare::RarefyDepth::Min => l.flag("rarefy", "min"),
                    super::compare::RarefyDepth::Individuals(k) => l.flag("rarefy", k),
                };
                l.flag("rarefy-reps", r.reps);
            }
            l.flag("alpha", s.alpha).distance(&s.combined);
            let note = (s.bootstrap != super::compare::BOOTSTRAP).then(|| {
                format!(
                    "this run's intervals use {} bootstrap resamples; the command uses {}",
                    s.bootstrap,
                    super::compare::BOOTSTRAP
                )
            });
            (l.run(s.permutations, Some(s.seed)), note)
        }
        AnalysisSpec::Partition(s) => {
            let mut l = Line::new("partition", selection);
            match &s.dissimilarities {
                partition::Dissimilarities::One(d) => l.distance(d),
                partition::Dissimilarities::Compared => l.switch("compare-distances", true),
            };
            l.flag("size", name_of(&s.size))
                .opt("shape-axes", s.shape_axes)
                .flag("permute", s.scheme.as_str())
                .opt("strata", s.strata.as_deref());
            (l.run(s.permutations, Some(s.seed)), None)
        }
        AnalysisSpec::Trend(s) => {
            let mut l = Line::new("trend", selection);
            l.flag("every", s.every.name())
                .opt("baseline", s.baseline.map(|(a, b)| format!("{a}..{b}")))
                .opt(
                    "breakpoint",
                    s.breakpoint.map(|b| match b {
                        crate::analysis::trend::BreakpointSpec::Auto => "auto".to_string(),
                        crate::analysis::trend::BreakpointSpec::Year(y) => y.to_string(),
                    }),
                )
                .flag("alpha", s.alpha)
                .flag("shape-distance", s.shape_distance.name())
                .distance(&s.distance)
                .flag("min-samples", s.min_samples)
                .flag("size-model", s.size_model.as_str())
                .flag("permute", s.scheme.as_str())
                .switch("by-taxon", s.by_taxon);
            (l.run(s.permutations, Some(s.seed)), None)
        }
        AnalysisSpec::Ordinate(s) => {
            let mut l = Line::new("ordinate", selection);
            l.flag("method", name_of(&s.method))
                .opt("by", s.by.as_deref())
                .periods(s.periods.as_ref());
            for c in &s.constraints {
                l.flag("constraint", c);
            }
            l.flag("axes", s.axes).distance(&s.distance);
            (l.run(s.permutations, s.seed), None)
        }
        AnalysisSpec::Diversity(s) => {
            let mut l = Line::new("diversity", selection);
            l.opt("rarefy-to", s.rarefy_to).flag(
                "coverage",
                match s.coverage {
                    None => "none".to_string(),
                    Some(super::diversity::CoverageTarget::Auto) => "auto".to_string(),
                    Some(super::diversity::CoverageTarget::Level(c)) => c.to_string(),
                },
            );
            l.opt("every", s.every.map(|e| e.name()))
                .opt("by", s.by.as_deref())
                .flag("permute", s.scheme.as_str())
                .opt("strata", s.strata.as_deref())
                .flag("alpha", s.alpha)
                .flag("bootstrap", s.bootstrap);
            (l.run(s.permutations, Some(s.seed)), None)
        }
        AnalysisSpec::Impact(s) => {
            let mut l = Line::new("impact", selection);
            l.flag("by", &s.by)
                .flag("impact", &s.impact)
                .flag("before", format!("{}..{}", s.before.0, s.before.1))
                .flag("after", format!("{}..{}", s.after.0, s.after.1))
                .flag("alpha", s.alpha)
                .flag("shape-distance", s.shape_distance.name());
            let note = (s.bootstrap != super::impact::BOOTSTRAP).then(|| {
                if s.bootstrap == 0 {
                    "this run's ratio-of-ratios interval is the Wald interval of runs stored \
                     before the site bootstrap; the command gives the site-bootstrap interval \
                     (every other number is the same)"
                        .to_string()
                } else {
                    format!(
                        "this run's interval uses {} site resamples; the command uses {}",
                        s.bootstrap,
                        super::impact::BOOTSTRAP
                    )
                }
            });
            (l.run(s.permutations, Some(s.seed)), note)
        }
    }
}
