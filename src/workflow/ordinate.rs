//! Ordination of a selection: principal coordinates of a dissimilarity (PCoA,
//! Gower 1966, Biometrika 53:325–338), correspondence analysis of the counts
//! (CA) or canonical correspondence analysis constrained by fields (CCA, ter
//! Braak 1986, Ecology 67:1167–1179) with the permutation test of the
//! constraints; group centroids on the first two axes with their 95 %
//! confidence ellipses (Hotelling's T² region). See `docs/methods.md`,
//! "Ordination and centroid ellipses (`tally ordinate`)".
//!
//! With [`Spec::periods`] the matrix is reshaped by [`Periods::apply`] inside
//! [`Spec::run`] (the one periods rule), so the stored fingerprint stays that
//! of the prepared matrix and `runs verify` reassembles the same one.

use std::borrow::Cow;
use std::collections::BTreeSet;

use nalgebra::DMatrix;
use serde::{Deserialize, Serialize};

use crate::analysis::cca_test::cca_permutation_test;
use crate::analysis::dissimilarity::Distance;
use crate::analysis::ellipse::group_ellipses;
use crate::analysis::ordination::{TaxonPoints, ca, cca, taxon_points, weighted_average_points};
use crate::analysis::pcoa;
use crate::analysis::permutation::PermutationOptions;
use crate::analysis::transform::Transform;
use crate::matrix::{CountMatrix, Unit};
use crate::store::Selection;

use super::design::{DistanceSpec, Periods};
use super::{Analysis, Prepared, Progress, Result, WorkflowError};

/// The run kind.
pub const KIND: &str = "ordinate";

/// Confidence level of the centroid ellipses.
pub const ELLIPSE_LEVEL: f64 = 0.95;

/// Segments of each ellipse boundary drawn.
const ELLIPSE_SEGMENTS: usize = 72;

/// What the test statistic of the CCA is.
pub const CCA_STATISTIC: &str = "pseudo-F of constrained against residual inertia";

/// Ordination method.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Method {
    /// Principal coordinates of the chosen dissimilarity.
    Pcoa,
    /// Correspondence analysis of the counts.
    Ca,
    /// Canonical correspondence analysis constrained by fields, with its test.
    Cca,
}

impl Method {
    /// Stable lowercase name (`pcoa`, `ca`, `cca`).
    pub fn name(self) -> &'static str {
        match self {
            Method::Pcoa => "pcoa",
            Method::Ca => "ca",
            Method::Cca => "cca",
        }
    }
}

/// What to compute.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Spec {
    /// Ordination method.
    pub method: Method,
    /// Field whose values group the samples (`period` when only `periods` is given).
    pub by: Option<String>,
    /// Year ranges defining the field `period`; rows outside every range are left out.
    pub periods: Option<Periods>,
    /// CCA: fields constraining the axes (numeric fields as covariates, others
    /// as factors with one indicator per level but the first).
    pub constraints: Vec<String>,
    /// Number of axes reported.
    pub axes: usize,
    /// PCoA: dissimilarity and transform.
    #[serde(flatten)]
    pub distance: DistanceSpec,
    /// CCA: random permutations of the test.
    pub permutations: usize,
    /// CCA: seed of the permutations (`None` for PCoA and CA, which draw nothing).
    pub seed: Option<u64>,
}

/// One reported axis.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Axis {
    /// Axis number, from 1.
    pub axis: usize,
    /// Eigenvalue (PCoA), principal inertia (CA) or canonical eigenvalue (CCA).
    pub eigenvalue: f64,
    /// Share of [`Outcome::share_of`] carried by the axis.
    pub share: f64,
}

/// How a constraint field entered the CCA.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum ConstraintKind {
    /// A numeric covariate.
    Numeric,
    /// A factor, one indicator column per level but the first.
    Factor,
}

/// One constraint field of the CCA.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Constraint {
    /// Field name.
    pub field: String,
    /// Numeric or factor.
    pub kind: ConstraintKind,
    /// Columns it contributed (the covariate, or `field=level` per non-reference level).
    pub columns: Vec<String>,
}

/// The permutation test of the CCA constraints.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CcaTest {
    /// What the statistic is ([`CCA_STATISTIC`]).
    pub statistic: String,
    /// `(constrained/q) / (residual/(n − q − 1))`.
    pub pseudo_f: f64,
    /// q, the rank of the constraints.
    pub df_constraints: usize,
    /// n − q − 1.
    pub df_residual: usize,
    /// Permutation p-value.
    pub p_value: f64,
    /// Permutations evaluated.
    pub permutations: usize,
    /// True when every distinct arrangement was enumerated.
    pub exact: bool,
    /// Seed of the permutations.
    pub seed: u64,
    /// Exchangeability scheme, described.
    pub scheme: String,
    /// Smallest attainable p-value.
    #[serde(rename = "smallest_possible_p")]
    pub min_p: f64,
}

/// The CCA part of an outcome.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CcaFit {
    /// Inertia explained by the constraints.
    pub constrained_inertia: f64,
    /// Residual inertia.
    pub unconstrained_inertia: f64,
    /// Constrained over total inertia.
    pub constrained_share: f64,
    /// Eigenvalues of the residual (unconstrained) axes.
    pub unconstrained_eigenvalues: Vec<f64>,
    /// The test of the constraints.
    pub test: CcaTest,
    /// The constraints as entered.
    pub constraints: Vec<Constraint>,
}

/// What is specific to each method (flattened into the outcome's JSON).
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(untagged)]
pub enum Fit {
    /// PCoA.
    Pcoa {
        /// The dissimilarity.
        distance: Distance,
        /// The transform applied before it.
        transform: Transform,
        /// Share of the absolute eigenvalue sum carried by negative eigenvalues.
        negative_eigenvalue_share: f64,
        /// The negative eigenvalues.
        negative_eigenvalues: Vec<f64>,
        /// Sum of the positive eigenvalues (what the axis shares are of).
        positive_eigenvalue_sum: f64,
    },
    /// CA.
    Ca {
        /// χ² of the table (total inertia × grand total).
        chi_square: f64,
    },
    /// CCA.
    Cca(CcaFit),
}

/// The 95 % confidence ellipse of a group's centre on the first two axes.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Ellipse {
    /// Confidence level.
    pub level: f64,
    /// Group centroid.
    pub centre: [f64; 2],
    /// Semi-axes, major first.
    pub semi_axes: [f64; 2],
    /// Angle of the major axis to axis 1, radians.
    pub angle: f64,
    /// Boundary points, for plots.
    #[serde(skip)]
    pub boundary: Vec<[f64; 2]>,
}

/// One group of samples.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Group {
    /// Group name (`all samples` without a grouping).
    pub group: String,
    /// Samples in the group.
    pub n: usize,
    /// Centroid ellipse (none with fewer than two axes or three samples).
    pub ellipse: Option<Ellipse>,
}

/// One sample's coordinates.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Sample {
    /// Row label.
    pub label: String,
    /// Site code.
    pub site: String,
    /// Year of the row.
    pub year: i32,
    /// Group name (`None` without a grouping field).
    pub group: Option<String>,
    /// Coordinates on the reported axes.
    pub coordinates: Vec<f64>,
    /// Index of the group in [`Outcome::groups`].
    #[serde(skip)]
    pub group_index: usize,
    /// Row total of the matrix analysed (counts, or counts per unit effort).
    #[serde(skip)]
    pub total: f64,
}

/// What was computed (keys of `tally ordinate --format json`, `docs/cli.md`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Outcome {
    /// Method used.
    pub method: Method,
    /// The selection as command-line flags.
    pub selection: String,
    /// The selection in plain words ([`describe_selection`]).
    pub selection_text: String,
    /// Samples analysed.
    pub samples_n: usize,
    /// What the axis shares are shares of.
    pub share_of: &'static str,
    /// The reported axes.
    pub axes: Vec<Axis>,
    /// Total inertia (PCoA: the trace of the Gower-centred matrix).
    pub total: f64,
    /// What is specific to the method.
    #[serde(flatten)]
    pub fit: Fit,
    /// Grouping field.
    pub by: Option<String>,
    /// Groups in legend order.
    pub groups: Vec<Group>,
    /// Samples, in matrix order.
    pub samples: Vec<Sample>,
    /// The taxa placed on the reported axes, largest contributions first (taxa
    /// with no organisms left out).
    pub taxa: Vec<TaxonScore>,
    /// What the taxon points are ([`TAXA_SCORES_STANDARD`], [`TAXA_SCORES_PROJECTED`]).
    pub taxa_scores: &'static str,
    /// How many taxa the table lists and the plot labels (`--taxa`).
    #[serde(skip)]
    pub taxa_shown: usize,
    /// Notes: the assembly's, then the periods' and the analysis's own.
    pub notes: Vec<String>,
    /// How many of `notes` came from the assembly.
    #[serde(skip)]
    pub assembly_notes: usize,
    /// The effort unit when values are per unit effort (`--per-effort`).
    #[serde(skip)]
    pub effort_unit: Option<String>,
}

impl Outcome {
    /// The CCA part, for a CCA.
    pub fn cca(&self) -> Option<&CcaFit> {
        match &self.fit {
            Fit::Cca(c) => Some(c),
            _ => None,
        }
    }

    /// Number of reported axes.
    pub fn n_axes(&self) -> usize {
        self.axes.len()
    }

    /// The notes that did not come from the assembly.
    pub fn own_notes(&self) -> &[String] {
        &self.notes[self.assembly_notes.min(self.notes.len())..]
    }
}

/// The selection in plain words, for plot subtitles and the report:
/// protocol, site conditions, years covered by `m`, months, unit, effort and
/// the numbers of samples and sites of `m`.
pub fn describe_selection(sel: &Selection, m: &CountMatrix) -> String {
    let mut parts = Vec::new();
    parts.push(match &sel.protocol {
        Some(p) => format!("{p} samples"),
        None => "all protocols".to_string(),
    });
    for (k, v) in &sel.site_where {
        parts.push(format!("{k} {v}"));
    }
    if !sel.sites.is_empty() {
        parts.push(format!("sites {}", sel.sites.join(", ")));
    }
    let y0 = m.samples.iter().map(|s| s.year).min();
    let y1 = m.samples.iter().map(|s| s.last_year).max();
    if let (Some(a), Some(b)) = (y0, y1) {
        parts.push(CountMatrix::period_label((a, b)));
    }
    if let Some((a, b)) = sel.months {
        parts.push(format!("months {a}–{b}"));
    }
    parts.push(
        match sel.unit.unwrap_or_default() {
            Unit::Event => "one row per event",
            Unit::SiteYear => "pooled per site and year",
            Unit::SiteSeason => "pooled per site and season",
            Unit::Site => "pooled per site",
        }
        .to_string(),
    );
    if sel.per_effort {
        let units: BTreeSet<&str> = m.samples.iter().map(|s| s.effort_unit.as_str()).collect();
        let u: Vec<&str> = units.into_iter().collect();
        parts.push(format!("per {}", u.join("/")));
    }
    let sites: BTreeSet<&str> = m.samples.iter().map(|s| s.site.as_str()).collect();
    format!(
        "{} ({} samples, {} sites)",
        parts.join(", "),
        m.samples.len(),
        sites.len()
    )
}

/// Sort group names: numerically when every name is a number, else as text.
fn sorted_levels(values: &[String]) -> Vec<String> {
    let mut lv: Vec<String> = values
        .iter()
        .cloned()
        .collect::<BTreeSet<_>>()
        .into_iter()
        .collect();
    if lv.iter().all(|v| v.parse::<f64>().is_ok()) {
        lv.sort_by(|a, b| {
            let (x, y) = (
                a.parse::<f64>().unwrap_or(0.0),
                b.parse::<f64>().unwrap_or(0.0),
            );
            x.total_cmp(&y)
        });
    }
    lv
}

/// Per-row text of `field`; `option` names the flag in errors.
fn field_text(m: &CountMatrix, field: &str, option: &'static str) -> Result<Vec<String>> {
    m.field_values(field).map_err(|cause| WorkflowError::Field {
        option,
        field: field.to_string(),
        cause,
    })
}

/// The CCA environmental matrix: numeric fields as covariates, other fields
/// dummy-coded (first level, in sorted order, as reference). The field
/// `period` defined by `--periods` is always a factor, even when its labels are
/// single years.
fn constraint_matrix(
    m: &CountMatrix,
    fields: &[String],
    periods: bool,
) -> Result<(DMatrix<f64>, Vec<Constraint>)> {
    let n = m.samples.len();
    let mut cols: Vec<Vec<f64>> = Vec::new();
    let mut info = Vec::new();
    for f in fields {
        let text = field_text(m, f, "--constraint")?;
        let numeric: Option<Vec<f64>> = if f == "period" && periods {
            None
        } else {
            text.iter()
                .map(|v| v.trim().parse::<f64>().ok().filter(|x| x.is_finite()))
                .collect()
        };
        match numeric {
            Some(v) => {
                cols.push(v);
                info.push(Constraint {
                    field: f.clone(),
                    kind: ConstraintKind::Numeric,
                    columns: vec![f.clone()],
                });
            }
            None => {
                let levels = sorted_levels(&text);
                if levels.len() < 2 {
                    return Err(WorkflowError::Refused(format!(
                        "constraint '{f}' has a single value ({}) in this selection",
                        levels.join("")
                    )));
                }
                let mut names = Vec::new();
                for l in &levels[1..] {
                    cols.push(text.iter().map(|v| f64::from(u8::from(v == l))).collect());
                    names.push(format!("{f}={l}"));
                }
                info.push(Constraint {
                    field: f.clone(),
                    kind: ConstraintKind::Factor,
                    columns: names,
                });
            }
        }
    }
    let z = DMatrix::from_fn(n, cols.len(), |i, j| cols[j][i]);
    Ok((z, info))
}

/// The counts of `m` without empty taxa (CA and CCA need none) and the names
/// of the taxa kept, noting how many were left out.
fn counts_without_empty_taxa(
    m: &CountMatrix,
    notes: &mut Vec<String>,
) -> (DMatrix<f64>, Vec<String>) {
    let (y, dropped) = m.drop_empty_taxa();
    if dropped > 0 {
        notes.push(format!(
            "{} with no organisms left out",
            crate::words::count(dropped, "taxon column", "taxon columns")
        ));
    }
    let names = y.taxa.iter().map(|t| t.name.clone()).collect();
    (y.values, names)
}

/// What the taxon points of each method are, in words (JSON `taxa_scores`).
pub const TAXA_SCORES_STANDARD: &str =
    "standard coordinates: each sample lies at the weighted average of the taxa it holds";
/// The same for PCoA.
pub const TAXA_SCORES_PROJECTED: &str = "weighted averages of the sample coordinates, weighted by the taxon's values: projected afterwards, not part of the fit";

/// One taxon placed in the ordination.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TaxonScore {
    /// Accepted name at the analysed rank.
    pub taxon: String,
    /// Coordinates on the reported axes.
    pub coordinates: Vec<f64>,
    /// Its share of the weighted spread of the taxa on the reported axes (CA
    /// and CCA: its contribution to their inertia); the shares add up to 1.
    pub contribution: f64,
}

/// Taxa with their points, largest contributions first.
fn taxon_scores(names: &[String], pts: &TaxonPoints) -> Vec<TaxonScore> {
    let mut v: Vec<TaxonScore> = names
        .iter()
        .enumerate()
        .map(|(j, name)| TaxonScore {
            taxon: name.clone(),
            coordinates: pts.coords.row(j).iter().copied().collect(),
            contribution: pts.contribution[j],
        })
        .collect();
    v.sort_by(|a, b| b.contribution.total_cmp(&a.contribution));
    v
}

/// The fitted ordination before axes are cut to the number reported.
struct Fitted {
    eigenvalues: Vec<f64>,
    shares: Vec<f64>,
    share_of: &'static str,
    coords: DMatrix<f64>,
    total: f64,
    fit: Fit,
    /// The taxa of the fit (names, standard coordinates or `None` for PCoA,
    /// column masses), for [`TaxonPoints`] once the axes are cut.
    taxa: FittedTaxa,
}

/// What places the taxa once the number of axes is known.
enum FittedTaxa {
    /// CA and CCA: the column standard coordinates, masses and eigenvalues.
    Standard {
        names: Vec<String>,
        standard: DMatrix<f64>,
        masses: Vec<f64>,
    },
    /// PCoA: weighted averages of the sample coordinates.
    Projected,
}

/// `v / total`, or 0 when the total is not positive.
fn share(v: f64, total: f64) -> f64 {
    if total > 0.0 { v / total } else { 0.0 }
}

impl Spec {
    fn pcoa(&self, m: &CountMatrix, notes: &mut Vec<String>) -> Result<Fitted> {
        let d = self.distance.compute(m)?;
        let p = pcoa(&d).map_err(|e| WorkflowError::kernel("principal coordinates", e, m))?;
        let k = p.coordinates.ncols();
        let eigenvalues = p.eigenvalues[..k].to_vec();
        let shares = eigenvalues
            .iter()
            .map(|v| share(*v, p.positive_sum))
            .collect();
        let negatives: Vec<f64> = p.eigenvalues.iter().copied().filter(|v| *v < 0.0).collect();
        notes.push(format!(
            "{} {:.2}% of the absolute eigenvalue sum ({} is {}Euclidean)",
            match negatives.len() {
                1 => "1 negative eigenvalue carries".to_string(),
                k => format!("{k} negative eigenvalues carry"),
            },
            100.0 * p.negative_inertia_share,
            self.distance.distance.name(),
            if negatives.is_empty() { "" } else { "not " }
        ));
        Ok(Fitted {
            eigenvalues,
            shares,
            share_of: "positive eigenvalue sum",
            total: p.trace,
            fit: Fit::Pcoa {
                distance: self.distance.distance,
                transform: self.distance.transform,
                negative_eigenvalue_share: p.negative_inertia_share,
                negative_eigenvalues: negatives,
                positive_eigenvalue_sum: p.positive_sum,
            },
            coords: p.coordinates,
            taxa: FittedTaxa::Projected,
        })
    }

    fn ca(m: &CountMatrix, notes: &mut Vec<String>) -> Result<Fitted> {
        let (y, names) = counts_without_empty_taxa(m, notes);
        let r = ca(&y).map_err(|e| WorkflowError::kernel("correspondence analysis", e, m))?;
        Ok(Fitted {
            taxa: FittedTaxa::Standard {
                names,
                standard: r.col_standard.clone(),
                masses: r.col_masses.clone(),
            },
            shares: r.inertia_shares(),
            eigenvalues: r.inertias,
            share_of: "inertia",
            total: r.total_inertia,
            fit: Fit::Ca {
                chi_square: r.chi_square,
            },
            coords: r.row_principal,
        })
    }

    fn cca(
        &self,
        m: &CountMatrix,
        notes: &mut Vec<String>,
        progress: &dyn Progress,
    ) -> Result<Fitted> {
        if self.constraints.is_empty() {
            return Err(WorkflowError::Refused(
                "CCA needs at least one --constraint FIELD".into(),
            ));
        }
        let seed = self.seed.ok_or_else(|| WorkflowError::Invalid {
            option: "--seed",
            reason: "the CCA test draws permutations and needs a seed".into(),
        })?;
        let (y, names) = counts_without_empty_taxa(m, notes);
        let (z, constraints) = constraint_matrix(m, &self.constraints, self.periods.is_some())?;
        let fit = cca(&y, &z)
            .map_err(|e| WorkflowError::kernel("canonical correspondence analysis", e, m))?;
        progress.stage("permutations of the constraints");
        let update = |d: usize, t: usize| progress.update(d, t);
        let t = cca_permutation_test(
            &y,
            &z,
            &PermutationOptions {
                permutations: self.permutations,
                seed,
            },
            Some(&update),
        )
        .map_err(|e| WorkflowError::kernel("testing the constraints", e, m))?;
        progress.finish();
        notes.push(
            "sample coordinates are weighted averages of the taxon scores (WA scores)".into(),
        );
        Ok(Fitted {
            taxa: FittedTaxa::Standard {
                names,
                standard: fit.species_standard.clone(),
                masses: fit.col_masses.clone(),
            },
            shares: fit
                .constrained_eigenvalues
                .iter()
                .map(|v| share(*v, fit.total_inertia))
                .collect(),
            eigenvalues: fit.constrained_eigenvalues.clone(),
            share_of: "total inertia",
            total: fit.total_inertia,
            fit: Fit::Cca(CcaFit {
                constrained_inertia: fit.constrained_inertia,
                unconstrained_inertia: fit.unconstrained_inertia,
                constrained_share: fit.constrained_share(),
                unconstrained_eigenvalues: fit.unconstrained_eigenvalues.clone(),
                test: CcaTest {
                    statistic: CCA_STATISTIC.to_string(),
                    pseudo_f: t.pseudo_f,
                    df_constraints: t.rank,
                    df_residual: t.n - t.rank - 1,
                    p_value: t.permutation.p_value,
                    permutations: t.permutation.permutations,
                    exact: t.permutation.exact,
                    seed: t.permutation.seed,
                    scheme: t.permutation.scheme,
                    min_p: t.permutation.min_p,
                },
                constraints,
            }),
            coords: fit.site_wa,
        })
    }

    /// The grouping field: `by`, or `period` when only periods are given.
    pub fn group_field(&self) -> Option<String> {
        self.by
            .clone()
            .or_else(|| self.periods.as_ref().map(|_| "period".to_string()))
    }
}

impl Analysis for Spec {
    const KIND: &'static str = KIND;
    type Outcome = Outcome;

    fn seed(&self) -> Option<u64> {
        match self.method {
            Method::Cca => self.seed,
            Method::Pcoa | Method::Ca => None,
        }
    }

    fn run(&self, prepared: &Prepared, progress: &dyn Progress) -> Result<Outcome> {
        if self.axes == 0 {
            return Err(WorkflowError::Invalid {
                option: "--axes",
                reason: "must be at least 1".into(),
            });
        }
        let m: Cow<'_, CountMatrix> = match &self.periods {
            Some(p) => Cow::Owned(p.apply(&prepared.matrix)?),
            None => Cow::Borrowed(&prepared.matrix),
        };
        let mut notes = prepared.notes.clone();
        notes.extend(m.notes.iter().skip(prepared.matrix.notes.len()).cloned());
        let assembly_notes = prepared.notes.len();
        let n = m.samples.len();
        if n < 3 {
            return Err(WorkflowError::Refused(format!(
                "the selection has {n} sample(s); an ordination needs at least 3"
            )));
        }
        let by = self.group_field();
        // Groups first: an unknown field is refused before any computation.
        let (group_names, group_of): (Vec<String>, Vec<usize>) = match &by {
            Some(f) => {
                let text = field_text(&m, f, "--by")?;
                let levels = sorted_levels(&text);
                let of = text
                    .iter()
                    .map(|v| levels.iter().position(|l| l == v).unwrap_or(0))
                    .collect();
                (levels, of)
            }
            None => (vec!["all samples".to_string()], vec![0; n]),
        };
        let fitted = match self.method {
            Method::Pcoa => self.pcoa(&m, &mut notes)?,
            Method::Ca => Self::ca(&m, &mut notes)?,
            Method::Cca => self.cca(&m, &mut notes, progress)?,
        };
        let k = self.axes.min(fitted.coords.ncols());
        if k < self.axes {
            notes.push(format!("only {k} axis/axes with non-zero eigenvalue"));
        }
        let coords = fitted.coords.columns(0, k).into_owned();
        let (taxa, taxa_scores) = match &fitted.taxa {
            FittedTaxa::Standard {
                names,
                standard,
                masses,
            } => {
                let pts = taxon_points(standard, masses, &fitted.eigenvalues, k)
                    .map_err(|e| WorkflowError::kernel("taxon scores", e, &m))?;
                (taxon_scores(names, &pts), TAXA_SCORES_STANDARD)
            }
            FittedTaxa::Projected => {
                let pts = weighted_average_points(&m.values, &coords)
                    .map_err(|e| WorkflowError::kernel("taxon projections", e, &m))?;
                let names: Vec<String> = m.taxa.iter().map(|t| t.name.clone()).collect();
                let mut all = taxon_scores(&names, &pts);
                all.retain(|t| t.contribution > 0.0 || t.coordinates.iter().any(|c| *c != 0.0));
                (all, TAXA_SCORES_PROJECTED)
            }
        };
        let ellipses = if k >= 2 {
            let x: Vec<f64> = coords.column(0).iter().copied().collect();
            let y: Vec<f64> = coords.column(1).iter().copied().collect();
            let mut e = group_ellipses(&x, &y, &group_of, ELLIPSE_LEVEL, ELLIPSE_SEGMENTS)
                .map_err(|e| WorkflowError::kernel("centroid ellipses", e, &m))?;
            e.resize(group_names.len(), None);
            e
        } else {
            vec![None; group_names.len()]
        };
        let groups = group_names
            .iter()
            .zip(ellipses)
            .enumerate()
            .map(|(g, (name, e))| Group {
                group: name.clone(),
                n: group_of.iter().filter(|&&x| x == g).count(),
                ellipse: e.map(|e| Ellipse {
                    level: e.level,
                    centre: e.centre,
                    semi_axes: e.semi_axes,
                    angle: e.angle,
                    boundary: e.boundary,
                }),
            })
            .collect();
        let totals = m.totals();
        let samples = m
            .samples
            .iter()
            .enumerate()
            .map(|(i, s)| Sample {
                label: s.label.clone(),
                site: s.site.clone(),
                year: s.year,
                group: by.as_ref().map(|_| group_names[group_of[i]].clone()),
                coordinates: coords.row(i).iter().copied().collect(),
                group_index: group_of[i],
                total: totals[i],
            })
            .collect();
        let axes = (0..k)
            .map(|a| Axis {
                axis: a + 1,
                eigenvalue: fitted.eigenvalues[a],
                share: fitted.shares[a],
            })
            .collect();
        let sel = &prepared.selection;
        Ok(Outcome {
            method: self.method,
            selection: sel.to_flags(),
            selection_text: describe_selection(sel, &m),
            samples_n: n,
            share_of: fitted.share_of,
            axes,
            total: fitted.total,
            fit: fitted.fit,
            by,
            groups,
            samples,
            taxa,
            taxa_scores,
            taxa_shown: super::compare::TAXA_SHOWN,
            notes,
            assembly_notes,
            effort_unit: sel
                .per_effort
                .then(|| m.samples.first().map(|s| s.effort_unit.clone()))
                .flatten(),
        })
    }
}

impl super::Outcome for Outcome {
    fn values(&self) -> Vec<(String, Option<f64>)> {
        match self.cca() {
            Some(c) => vec![
                ("constrained_share".into(), Some(c.constrained_share)),
                ("pseudo_f".into(), Some(c.test.pseudo_f)),
                ("p_value".into(), Some(c.test.p_value)),
            ],
            None => {
                let mut v = vec![("total".to_string(), Some(self.total))];
                for a in &self.axes {
                    v.push((format!("axis{}.share", a.axis), Some(a.share)));
                }
                v
            }
        }
    }

    fn notes(&self) -> &[String] {
        &self.notes
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn levels_sort_numerically_when_all_are_numbers() {
        let v = |s: &[&str]| s.iter().map(|x| x.to_string()).collect::<Vec<_>>();
        assert_eq!(
            sorted_levels(&v(&["10", "9", "10", "2"])),
            v(&["2", "9", "10"])
        );
        assert_eq!(sorted_levels(&v(&["b", "a", "10"])), v(&["10", "a", "b"]));
    }

    #[test]
    fn spec_round_trips_through_the_stored_form() {
        let spec = Spec {
            method: Method::Cca,
            by: Some("reach".into()),
            periods: Some(Periods(vec![(2008, 2015), (2016, 2025)])),
            constraints: vec!["period".into()],
            axes: 2,
            distance: DistanceSpec::default(),
            permutations: 99,
            seed: Some(7),
        };
        let v = serde_json::to_value(super::super::AnalysisSpec::from(spec.clone())).unwrap();
        assert_eq!(v["kind"], KIND);
        assert_eq!(v["method"], "cca");
        assert_eq!(v["distance"], "bray-curtis");
        match serde_json::from_value::<super::super::AnalysisSpec>(v).unwrap() {
            super::super::AnalysisSpec::Ordinate(s) => assert_eq!(s, spec),
            other => panic!("{other:?}"),
        }
    }
}
