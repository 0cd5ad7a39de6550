//! `impact`: before/after × control/impact (BACI). Did the impact sites change
//! differently from the control sites, in abundance (size) and in composition
//! (shape)? The kernels are [`crate::analysis::baci`]; this module picks the rows
//! of the two periods, the role of every site, and words the verdict
//! (docs/methods.md, "Before/after × control/impact").

use serde::{Deserialize, Serialize};

use crate::analysis::baci::{BaciOptions, BaciRows, BaciShape, BaciSize, baci_shape, baci_size};
use crate::analysis::taxa::{BaciTaxon, baci_contrast};
use crate::report::format::fmt_p;

use super::design::{self, ShapeDistance, TermScheme};
use super::{Analysis, Prepared, Progress, Result, WorkflowError};

/// The run kind.
pub const KIND: &str = "impact";

/// The default significance level of the wording.
pub const ALPHA: f64 = 0.05;

/// What to compute.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Spec {
    /// The site-level field that says which sites are impact sites.
    pub by: String,
    /// The value of `by` of the impact sites (every other value is a control).
    pub impact: String,
    /// Years before the change (inclusive).
    pub before: (i32, i32),
    /// Years after the change (inclusive).
    pub after: (i32, i32),
    /// Significance level of the wording of the verdict.
    pub alpha: f64,
    /// Random permutations per test.
    pub permutations: usize,
    /// Seed of the random streams.
    pub seed: u64,
    /// Site-bootstrap resamples of the ratio-of-ratios interval ([`BOOTSTRAP`]); 0
    /// (runs stored before the bootstrap) gives the Wald interval.
    #[serde(default)]
    pub bootstrap: usize,
    /// The shape-only space the sites' shifts are measured in (Hellinger, or
    /// chi-square: both have Euclidean coordinates, so centroids are defined).
    #[serde(default)]
    pub shape_distance: ShapeDistance,
}

/// Site resamples of the interval of the ratio of ratios.
pub const BOOTSTRAP: usize = 999;

/// The sites of each role.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Roles {
    /// Impact sites.
    pub impact: Vec<String>,
    /// Control sites.
    pub control: Vec<String>,
}

/// What was computed.
#[derive(Debug, Clone, Serialize)]
pub struct Outcome {
    /// The role field.
    pub by: String,
    /// Its impact value.
    pub impact: String,
    /// Years before.
    pub before: (i32, i32),
    /// Years after.
    pub after: (i32, i32),
    /// Rows analysed.
    pub n: usize,
    /// The sites of each role.
    pub sites: Roles,
    /// Significance level of the wording.
    pub alpha: f64,
    /// The totals are per unit effort.
    pub per_effort: bool,
    /// Size: the period × role interaction of the log-linear count model.
    pub size: BaciSize,
    /// Shape: the sites' centroid shifts in the shape-only space by role.
    pub shape: BaciShape,
    /// That space.
    pub shape_distance: ShapeDistance,
    /// The size p-value is at most alpha.
    pub abundance_differs: bool,
    /// The shape p-value is at most alpha.
    pub composition_differs: bool,
    /// The dispersion p-value of the shifts is at most alpha.
    pub dispersion_differs: bool,
    /// The verdict in words.
    pub verdict: String,
    /// The exchangeability scheme, described.
    pub scheme: String,
    /// The scheme the role was tested under, and why.
    pub design: Vec<TermScheme>,
    /// Seed used.
    pub seed: u64,
    /// Random permutations requested per test.
    pub permutations: usize,
    /// Fingerprint of the matrix analysed.
    pub fingerprint: String,
    /// The taxa behind the contrast: each taxon's rates in the four cells, its
    /// ratio of ratios, its shares of the composition and size interactions and
    /// its own BACI test (docs/methods.md, "Taxa behind the change").
    pub taxa: Vec<Taxon>,
    /// How many taxa the table shows (`--taxa`; JSON lists every taxon).
    #[serde(skip)]
    pub taxa_shown: usize,
    /// Notes for the user.
    pub notes: Vec<String>,
}

/// One taxon of the BACI contrast.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Taxon {
    /// Accepted name at the analysed rank.
    pub taxon: String,
    /// Its rates, ratio of ratios, contributions and test.
    #[serde(flatten)]
    pub change: BaciTaxon,
}

impl Analysis for Spec {
    const KIND: &'static str = KIND;
    type Outcome = Outcome;

    fn seed(&self) -> Option<u64> {
        Some(self.seed)
    }

    fn run(&self, prepared: &Prepared, progress: &dyn Progress) -> Result<Outcome> {
        design::check_alpha(self.alpha)?;
        let (b, a) = (self.before, self.after);
        if b.0 > b.1 || a.0 > a.1 || !(b.1 < a.0 || a.1 < b.0) {
            return Err(WorkflowError::Invalid {
                option: "--after",
                reason: format!(
                    "the periods {}..{} and {}..{} must be year ranges that do not overlap",
                    b.0, b.1, a.0, a.1
                ),
            });
        }
        let full = &prepared.matrix;
        let mut notes = prepared.notes.clone();
        let in_period = |y: i32| (b.0..=b.1).contains(&y) || (a.0..=a.1).contains(&y);
        let keep: Vec<usize> = (0..full.samples.len())
            .filter(|&i| in_period(full.samples[i].year))
            .collect();
        if keep.len() < full.samples.len() {
            notes.push(format!(
                "{} outside {}..{} and {}..{} left out",
                crate::words::count(full.samples.len() - keep.len(), "row", "rows"),
                b.0,
                b.1,
                a.0,
                a.1
            ));
        }
        let m0 = full.select_rows(&keep);
        let values = m0
            .field_values(&self.by)
            .map_err(|cause| WorkflowError::Field {
                option: "--by",
                field: self.by.clone(),
                cause,
            })?;
        if !values.contains(&self.impact) {
            let mut v = values.clone();
            v.sort();
            v.dedup();
            return Err(WorkflowError::Refused(format!(
                "--impact {} is not a value of {} in this selection (values: {})",
                self.impact,
                self.by,
                v.join(", ")
            )));
        }
        // Sites with rows in both periods and at least one animal; the others carry
        // no information on a change at that site.
        let after_of = |y: i32| (a.0..=a.1).contains(&y);
        let mut dropped: Vec<String> = Vec::new();
        let mut sites: Vec<String> = m0.samples.iter().map(|s| s.site.clone()).collect();
        sites.sort();
        sites.dedup();
        let totals = m0.totals();
        let usable: Vec<String> = sites
            .into_iter()
            .filter(|s| {
                let rows: Vec<usize> = (0..m0.samples.len())
                    .filter(|&i| &m0.samples[i].site == s)
                    .collect();
                let both = rows.iter().any(|&i| after_of(m0.samples[i].year))
                    && rows.iter().any(|&i| !after_of(m0.samples[i].year));
                let caught = rows.iter().any(|&i| totals[i] > 0.0);
                if !(both && caught) {
                    dropped.push(s.clone());
                }
                both && caught
            })
            .collect();
        if !dropped.is_empty() {
            notes.push(format!(
                "{} without rows in both periods, or that caught nothing, left out: {}",
                crate::words::noun(&dropped.len(), "a site", "sites"),
                dropped.join(", ")
            ));
        }
        let rows: Vec<usize> = (0..m0.samples.len())
            .filter(|&i| usable.contains(&m0.samples[i].site))
            .collect();
        let m = m0.select_rows(&rows);
        let role_values: Vec<&String> = rows.iter().map(|&i| &values[i]).collect();
        let n = m.samples.len();
        let (site_codes, n_sites) = design::site_codes(&m);
        let mut impact = vec![None::<bool>; n_sites];
        for i in 0..n {
            let is = role_values[i] == &self.impact;
            match impact[site_codes[i]] {
                None => impact[site_codes[i]] = Some(is),
                Some(prev) if prev != is => {
                    return Err(WorkflowError::Refused(format!(
                        "--by {}: site {} is {} in some rows and not in others; BACI needs each \
                         site to keep one role (impact or control) throughout",
                        self.by, m.samples[i].site, self.impact
                    )));
                }
                Some(_) => {}
            }
        }
        let impact: Vec<bool> = impact.into_iter().map(|v| v.unwrap_or(false)).collect();
        let mut roles = Roles {
            impact: Vec::new(),
            control: Vec::new(),
        };
        for (s, &is_impact) in impact.iter().enumerate() {
            let code = m.samples[site_codes.iter().position(|&c| c == s).unwrap_or(0)]
                .site
                .clone();
            if is_impact {
                roles.impact.push(code);
            } else {
                roles.control.push(code);
            }
        }
        if roles.impact.is_empty() || roles.control.is_empty() {
            return Err(WorkflowError::Refused(format!(
                "BACI needs impact and control sites with rows before and after: this selection \
                 has {} impact and {}",
                roles.impact.len(),
                crate::words::count(roles.control.len(), "control site", "control sites")
            )));
        }
        let mut years: Vec<i32> = m.samples.iter().map(|s| s.year).collect();
        years.sort_unstable();
        years.dedup();
        let year: Vec<usize> = m
            .samples
            .iter()
            .map(|s| years.binary_search(&s.year).unwrap_or(0))
            .collect();
        let after: Vec<bool> = m.samples.iter().map(|s| after_of(s.year)).collect();
        let per_effort = prepared.selection.per_effort;
        let totals = m.totals();
        let (counts, effort) = design::counts_and_effort(&m, per_effort);
        let opts = BaciOptions {
            permutations: self.permutations,
            seed: self.seed,
            bootstrap: self.bootstrap,
        };
        let baci_rows = BaciRows {
            site: &site_codes,
            year: &year,
            after: &after,
            impact: &impact,
        };
        progress.stage("impact: size");
        let size = baci_size(&counts, &effort, baci_rows, &opts)
            .map_err(|e| WorkflowError::kernel("BACI size test", e, &m))?;
        progress.stage("impact: shape");
        // Rows that caught nothing have no composition.
        let filled: Vec<usize> = (0..n).filter(|&i| totals[i] > 0.0).collect();
        if filled.len() < n {
            notes.push(format!(
                "{} caught nothing: they count in the size test and are left out of the \
                 composition test",
                crate::words::count(n - filled.len(), "row", "rows")
            ));
        }
        let fm = m.select_rows(&filled);
        let distance = self.shape_distance.distance();
        let h = distance
            .euclidean_coordinates(&fm.values)
            .map_err(|e| WorkflowError::kernel(format!("{} coordinates", distance.name()), e, &fm))?
            .expect("invariant: every shape-only distance has Euclidean coordinates");
        let (fs, fy, fa): (Vec<usize>, Vec<usize>, Vec<bool>) = (
            filled.iter().map(|&i| site_codes[i]).collect(),
            filled.iter().map(|&i| year[i]).collect(),
            filled.iter().map(|&i| after[i]).collect(),
        );
        let shape = baci_shape(
            &h,
            BaciRows {
                site: &fs,
                year: &fy,
                after: &fa,
                impact: &impact,
            },
            &opts,
        )
        .map_err(|e| WorkflowError::kernel("BACI composition test", e, &fm))?;
        progress.stage("impact: each taxon");
        let all: Vec<usize> = (0..n).collect();
        let (tc, te) = design::taxon_counts(&m, per_effort, &all);
        let contrast = baci_contrast(&tc, &te, baci_rows, Some(&opts))
            .map_err(|e| WorkflowError::kernel("per-taxon BACI contrast", e, &m))?;
        let taxa: Vec<Taxon> = contrast
            .taxa
            .into_iter()
            .map(|t| Taxon {
                taxon: m.taxa[t.column].name.clone(),
                change: t,
            })
            .collect();
        progress.finish();
        let alpha = self.alpha;
        let abundance_differs = size.p_value <= alpha;
        let composition_differs = shape.p_value <= alpha;
        let dispersion_differs = shape.dispersion_p_value <= alpha;
        let mut verdict = format!(
            "impact ({}) against control sites, {}..{} against {}..{}: abundance {} (ratio of \
             ratios ×{:.2}, 95% CI {:.2}–{:.2}, p = {}); composition {} (p = {})",
            self.impact,
            a.0,
            a.1,
            b.0,
            b.1,
            if abundance_differs {
                if size.ratio_of_ratios < 1.0 {
                    "fell relative to the controls"
                } else {
                    "rose relative to the controls"
                }
            } else {
                "did not change differently"
            },
            size.ratio_of_ratios,
            size.ci_low,
            size.ci_high,
            fmt_p(size.p_value, size.permutations),
            if composition_differs {
                "changed differently"
            } else {
                "did not change differently"
            },
            fmt_p(shape.p_value, shape.permutations),
        );
        if composition_differs {
            verdict.push_str(&super::compare::drivers_in_words(
                taxa.iter().map(|t| {
                    (
                        t.taxon.as_str(),
                        t.change.shape_contribution,
                        t.change.share_change_pp,
                        t.change.p_adjusted,
                    )
                }),
                alpha,
            ));
        }
        if dispersion_differs {
            verdict.push_str(&format!(
                "; the sites' composition shifts differ in spread between roles (p = {}), \
                 so read the composition result with care",
                fmt_p(shape.dispersion_p_value, shape.dispersion_permutations)
            ));
        }
        let smallest = size.smallest_possible_p.max(shape.smallest_possible_p);
        if smallest > alpha {
            verdict.push_str(&format!(
                "; with {} impact and {} no p-value can be below {:.3}, so this \
                 design cannot reach p ≤ {alpha}: add sites",
                roles.impact.len(),
                crate::words::count(roles.control.len(), "control site", "control sites"),
                smallest
            ));
        }
        let design = vec![TermScheme {
            term: format!("{} × period", self.by),
            permute: "whole-sites",
            reason: format!(
                "sites are the replicates of the impact/control contrast: the roles are permuted \
                 among the {n_sites} sites, each keeping its whole series"
            ),
            scheme: crate::analysis::permutation::Scheme::WholeSites(site_codes.clone()),
        }];
        Ok(Outcome {
            by: self.by.clone(),
            impact: self.impact.clone(),
            before: b,
            after: a,
            n,
            sites: roles,
            alpha,
            per_effort,
            scheme: size.scheme.clone(),
            size,
            shape,
            shape_distance: self.shape_distance,
            abundance_differs,
            composition_differs,
            dispersion_differs,
            verdict,
            design,
            seed: self.seed,
            permutations: self.permutations,
            fingerprint: prepared.fingerprint(),
            taxa,
            taxa_shown: super::compare::TAXA_SHOWN,
            notes,
        })
    }
}

impl super::Outcome for Outcome {
    fn values(&self) -> Vec<(String, Option<f64>)> {
        vec![
            (
                "size.ratio_of_ratios".into(),
                Some(self.size.ratio_of_ratios),
            ),
            ("size.ci_low".into(), Some(self.size.ci_low)),
            ("size.ci_high".into(), Some(self.size.ci_high)),
            ("size.p_value".into(), Some(self.size.p_value)),
            ("shape.pseudo_f".into(), Some(self.shape.pseudo_f)),
            ("shape.p_value".into(), Some(self.shape.p_value)),
            (
                "shape.dispersion_p_value".into(),
                Some(self.shape.dispersion_p_value),
            ),
        ]
    }

    fn notes(&self) -> &[String] {
        &self.notes
    }
}
