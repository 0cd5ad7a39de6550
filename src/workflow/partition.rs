//! How much of a dissimilarity is size (total abundance), how much is shape
//! (composition), how much cannot be assigned to either, and how much neither
//! explains: db-RDA variance partitioning (Borcard, Legendre & Drapeau 1992,
//! Ecology 73:1045–1055) with raw and adjusted fractions (Peres-Neto et al.
//! 2006, Ecology 87:2614–2625) and Freedman–Lane permutation tests of the two
//! unique parts; see `docs/methods.md`, "The four parts". One dissimilarity,
//! or the five of [`COMPARED`] in one table.

use serde::{Deserialize, Serialize};

use crate::analysis::AnalysisError;
use crate::analysis::dissimilarity::Distance;
use crate::analysis::partition::{
    Fractions, PartitionOptions, PartitionResult, ShapeAxes, SizeCoding, UniqueTest, partition,
};
use crate::analysis::transform::Transform;

use super::design::{self, DistanceSpec, PermuteDesign, TermScheme};
use super::{Analysis, Prepared, Progress, Result, WorkflowError};

/// The run kind.
pub const KIND: &str = "partition";

/// The pairs of `--compare-distances`: (dissimilarity, transform).
pub const COMPARED: [DistanceSpec; 5] = [
    DistanceSpec {
        distance: Distance::BrayCurtis,
        transform: Transform::None,
    },
    DistanceSpec {
        distance: Distance::BrayCurtis,
        transform: Transform::FourthRoot,
    },
    DistanceSpec {
        distance: Distance::Euclidean,
        transform: Transform::Log1p,
    },
    DistanceSpec {
        distance: Distance::ChiSquare,
        transform: Transform::None,
    },
    DistanceSpec {
        distance: Distance::Hellinger,
        transform: Transform::None,
    },
];

/// Residual degrees of freedom the automatic shape design keeps (`docs/methods.md`,
/// "The shape design").
pub const MIN_RESID_DF: usize = 10;

/// The caution given beside every size/shape result (`docs/methods.md`, "Cautions").
pub const CAUTION: &str = "Caution: where total abundance changes, the spread of counts usually \
changes with it (a mean-variance relationship), and a distance-based analysis can then read a \
change of spread as a change of location (Warton & Hui 2017, Methods Ecol. Evol. 8:1408-1414). \
Read distance-based results together with the size test and the dispersion test.";

/// What "shared" means, given with every partition (`docs/methods.md`, "What \"shared\" means").
pub const SHARED: &str = "\"Shared\" is variation that size and shape explain together: samples \
that differ in total also differ in composition, so this part cannot be assigned to either. \
Adjusted fractions can be negative (an estimate of a part near zero; reported as computed).";

/// Which dissimilarities are partitioned.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Dissimilarities {
    /// One dissimilarity after one transform.
    One(DistanceSpec),
    /// The five pairs of [`COMPARED`], in that order.
    Compared,
}

impl Dissimilarities {
    /// The pairs partitioned, in order.
    pub fn pairs(&self) -> Vec<DistanceSpec> {
        match self {
            Dissimilarities::One(d) => vec![*d],
            Dissimilarities::Compared => COMPARED.to_vec(),
        }
    }
}

/// What to compute.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Spec {
    /// The dissimilarities partitioned.
    pub dissimilarities: Dissimilarities,
    /// How size enters.
    pub size: SizeCoding,
    /// Exactly this many leading correspondence-analysis axes represent shape;
    /// `None`: all profile dimensions unless fewer than [`MIN_RESID_DF`] residual
    /// degrees of freedom would remain, then the leading axes that leave that many.
    pub shape_axes: Option<usize>,
    /// Permute only within the levels of this field.
    pub strata: Option<String>,
    /// How rows move (`--permute`): size and shape are row-level, so `auto` moves
    /// rows within their site when sites repeat.
    #[serde(default = "PermuteDesign::before_designs")]
    pub scheme: PermuteDesign,
    /// Random permutations per test.
    pub permutations: usize,
    /// Seed of the random streams.
    pub seed: u64,
}

impl Spec {
    /// The five-way partition ([`COMPARED`]) with the default design: log totals,
    /// automatic shape axes, free permutations.
    pub fn compared(permutations: usize, seed: u64) -> Spec {
        Spec {
            dissimilarities: Dissimilarities::Compared,
            size: SizeCoding::LogTotal,
            shape_axes: None,
            strata: None,
            scheme: PermuteDesign::Auto,
            permutations,
            seed,
        }
    }
}

/// R² of the three fitted models.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct R2 {
    /// Size alone.
    pub size: f64,
    /// Shape alone.
    pub shape: f64,
    /// Size and shape together.
    pub both: f64,
}

/// The tests of the two unique parts.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Tests {
    /// Size given shape.
    pub size_only: UniqueTest,
    /// Shape given size.
    pub shape_only: UniqueTest,
}

/// The partition of one dissimilarity.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Part {
    /// The dissimilarity.
    pub distance: Distance,
    /// The transform applied before it.
    pub transform: Transform,
    /// How size entered.
    pub size: SizeCoding,
    /// Rows.
    pub n: usize,
    /// Total variation (trace of the Gower-centred matrix).
    pub total_variation: f64,
    /// R² of the fitted models.
    pub r2: R2,
    /// Raw fractions.
    pub fractions: Fractions,
    /// Adjusted fractions.
    pub adjusted_fractions: Fractions,
    /// Tests of the unique parts.
    pub tests: Tests,
    /// Dimensions of the shape design.
    pub shape_axes: usize,
    /// `profiles` or `ca-axes`.
    pub shape_design: &'static str,
    /// Share of the profile inertia the shape design carries.
    pub shape_inertia_share: f64,
    /// Residual degrees of freedom of the full model.
    pub df_resid: usize,
    /// One set explains the whole dissimilarity (the tests are then not applicable).
    pub one_block_explains_all: bool,
    /// Seed used.
    pub seed: u64,
    /// Exchangeability scheme, described.
    pub scheme: String,
    /// The kernel's notes for this partition.
    pub notes: Vec<String>,
}

impl Part {
    fn of(r: PartitionResult, d: DistanceSpec, size: SizeCoding) -> Part {
        let f = &r.fit;
        Part {
            distance: d.distance,
            transform: d.transform,
            size,
            n: f.n,
            total_variation: f.total_ss,
            r2: R2 {
                size: f.r2_size,
                shape: f.r2_shape,
                both: f.r2_both,
            },
            fractions: f.fractions,
            adjusted_fractions: f.adjusted_fractions,
            shape_axes: r.shape.axes,
            shape_design: r.shape.kind,
            shape_inertia_share: r.shape.inertia_share,
            df_resid: f.df_resid,
            one_block_explains_all: f.exhaustive,
            tests: Tests {
                size_only: r.size_only,
                shape_only: r.shape_only,
            },
            seed: r.seed,
            scheme: r.scheme,
            notes: r.notes,
        }
    }

    /// Headline numbers, named with `prefix`.
    fn values(&self, prefix: &str) -> Vec<(String, Option<f64>)> {
        let a = &self.adjusted_fractions;
        vec![
            (format!("{prefix}adj.size_only"), Some(a.size_only)),
            (format!("{prefix}adj.shape_only"), Some(a.shape_only)),
            (format!("{prefix}adj.shared"), Some(a.shared)),
            (format!("{prefix}adj.unexplained"), Some(a.unexplained)),
            (format!("{prefix}p.size_only"), self.tests.size_only.p_value),
            (
                format!("{prefix}p.shape_only"),
                self.tests.shape_only.p_value,
            ),
        ]
    }
}

/// One partition, or several side by side.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(untagged)]
pub enum Partitions {
    /// One dissimilarity: its fields at the top level of the outcome.
    One(Box<Part>),
    /// The pairs of [`COMPARED`], under `partitions`.
    Compared {
        /// One partition per pair, in the order of [`COMPARED`].
        partitions: Vec<Part>,
        /// Seed used.
        seed: u64,
        /// Rows.
        n: usize,
    },
}

/// What was computed.
#[derive(Debug, Clone, Serialize)]
pub struct Outcome {
    /// The partition(s).
    #[serde(flatten)]
    pub partitions: Partitions,
    /// The permutation scheme of the tests of the unique parts, and why.
    pub design: Vec<TermScheme>,
    /// Random permutations per test.
    pub permutations: usize,
    /// The totals are per unit effort.
    pub per_effort: bool,
    /// [`CAUTION`].
    pub caution: &'static str,
    /// [`SHARED`].
    pub shared_means: &'static str,
    /// Notes for the user: the assembly's, then every partition's own.
    #[serde(skip)]
    pub notes: Vec<String>,
    /// How many of `notes` came from the assembly.
    #[serde(skip)]
    pub assembly_notes: usize,
}

impl Outcome {
    /// The partitions, in order (one without `--compare-distances`).
    pub fn parts(&self) -> &[Part] {
        match &self.partitions {
            Partitions::One(p) => std::slice::from_ref(&**p),
            Partitions::Compared { partitions, .. } => partitions,
        }
    }

    /// Whether the pairs of [`COMPARED`] were partitioned.
    pub fn compared(&self) -> bool {
        matches!(self.partitions, Partitions::Compared { .. })
    }

    /// The notes of the analysis itself (the assembly's left out).
    pub fn own_notes(&self) -> &[String] {
        &self.notes[self.assembly_notes.min(self.notes.len())..]
    }
}

impl Spec {
    /// A saturated design, explained in terms of the flags that change it.
    fn saturated(&self, e: AnalysisError, m: &crate::matrix::CountMatrix) -> WorkflowError {
        match e {
            AnalysisError::Saturated { rank, n } if rank >= n || self.shape_axes.is_some() => {
                WorkflowError::Refused(format!(
                    "too few samples for the model: size and {} shape dimension(s) need {rank} \
                     model columns (intercept included) for {n} samples, leaving nothing to \
                     measure the scatter against; select more samples or fewer shape axes \
                     (--shape-axes K with K <= {})",
                    rank.saturating_sub(2),
                    n.saturating_sub(3)
                ))
            }
            AnalysisError::Saturated { n, .. } => WorkflowError::Refused(format!(
                "with {n} samples, size and even one shape axis would leave fewer than \
                 {MIN_RESID_DF} residual degrees of freedom (adjusted fractions would be \
                 unstable); select more samples, or accept fewer residual degrees of freedom \
                 with --shape-axes K (K <= {})",
                n.saturating_sub(3)
            )),
            other => WorkflowError::kernel("size/shape partition", other, m),
        }
    }
}

impl Analysis for Spec {
    const KIND: &'static str = KIND;
    type Outcome = Outcome;

    fn seed(&self) -> Option<u64> {
        Some(self.seed)
    }

    fn run(&self, prepared: &Prepared, progress: &dyn Progress) -> Result<Outcome> {
        let m = &prepared.matrix;
        // Size and shape are properties of each row: the unique parts are tested
        // under the scheme that fits a row-level term.
        let totals = m.totals();
        let design = design::term_scheme(m, self.scheme, self.strata.as_deref(), "size", &totals)?;
        let opts = PartitionOptions {
            size: self.size,
            shape_axes: match self.shape_axes {
                Some(k) => ShapeAxes::Fixed(k),
                None => ShapeAxes::Auto {
                    min_resid_df: MIN_RESID_DF,
                },
            },
            permutations: self.permutations,
            seed: self.seed,
            scheme: design.scheme.clone(),
        };
        progress.stage("partition");
        let cb = |done: usize, total: usize| progress.update(done, total);
        let mut parts = Vec::new();
        for d in self.dissimilarities.pairs() {
            let dm = d.compute(m)?;
            let r =
                partition(&m.values, &dm, &opts, Some(&cb)).map_err(|e| self.saturated(e, m))?;
            parts.push(Part::of(r, d, self.size));
        }
        progress.finish();
        let mut notes = prepared.notes.clone();
        notes.extend(parts.iter().flat_map(|p| p.notes.iter().cloned()));
        let partitions = match self.dissimilarities {
            Dissimilarities::One(_) => Partitions::One(Box::new(
                parts
                    .pop()
                    .expect("invariant: one dissimilarity gives one partition"),
            )),
            Dissimilarities::Compared => Partitions::Compared {
                partitions: parts,
                seed: self.seed,
                n: m.values.nrows(),
            },
        };
        Ok(Outcome {
            partitions,
            design: vec![design],
            permutations: self.permutations,
            per_effort: prepared.selection.per_effort,
            caution: CAUTION,
            shared_means: SHARED,
            assembly_notes: prepared.notes.len(),
            notes,
        })
    }
}

impl super::Outcome for Outcome {
    fn values(&self) -> Vec<(String, Option<f64>)> {
        let compared = self.compared();
        self.parts()
            .iter()
            .flat_map(|p| {
                let prefix = if compared {
                    format!("{}+{}.", p.distance.name(), p.transform.name())
                } else {
                    String::new()
                };
                p.values(&prefix)
            })
            .collect()
    }

    fn notes(&self) -> &[String] {
        &self.notes
    }
}
