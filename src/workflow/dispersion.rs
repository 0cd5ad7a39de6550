//! The test of equal multivariate spread between groups (Anderson 2006,
//! Biometrics 62:245–253): distances of rows to their group centroid in the
//! space of the dissimilarity, a one-way F on them, and a permutation p-value;
//! optionally pair by pair with Holm and Benjamini–Hochberg adjustment.

use serde::{Deserialize, Serialize};

use crate::analysis::dispersion::{
    DispersionGroup, DispersionOptions, DispersionPair, Permute, dispersion, dispersion_pairwise,
};
use crate::analysis::dissimilarity::Distance;
use crate::analysis::transform::Transform;

use super::design::{self, DistanceSpec};
use super::{Analysis, Prepared, Progress, Result, WorkflowError};

/// The run kind.
pub const KIND: &str = "dispersion";

/// What to compute.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Spec {
    /// The factor whose groups are compared.
    pub by: String,
    /// Permute only within the levels of this field.
    pub strata: Option<String>,
    /// How rows are exchanged (runs stored before this choice existed were free).
    #[serde(default = "design::PermuteDesign::before_designs")]
    pub scheme: design::PermuteDesign,
    /// Also compare every pair of groups.
    pub pairwise: bool,
    /// What is permuted to build the null distribution of F.
    pub permute: Permute,
    /// Dissimilarity and transform.
    #[serde(flatten)]
    pub distance: DistanceSpec,
    /// Random permutations per test.
    pub permutations: usize,
    /// Seed of the random streams.
    pub seed: u64,
}

/// One row's distance to its group centroid.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RowDistance {
    /// Row label.
    pub label: String,
    /// The row's group.
    pub group: String,
    /// Distance to the group centroid.
    pub distance: f64,
}

/// What was computed.
#[derive(Debug, Clone, Serialize)]
pub struct Outcome {
    /// Rows analysed.
    pub n: usize,
    /// The factor.
    pub by: String,
    /// The strata field, if permutations were restricted.
    pub strata: Option<String>,
    /// The scheme the factor was tested under, and why.
    pub design: Vec<design::TermScheme>,
    /// The dissimilarity.
    pub distance: Distance,
    /// The transform applied before it.
    pub transform: Transform,
    /// What one row is.
    pub unit: crate::matrix::Unit,
    /// Group sizes and mean distances to the centroid.
    pub groups: Vec<DispersionGroup>,
    /// One-way F on the distances.
    pub f: f64,
    /// Degrees of freedom (a − 1, n − a).
    pub df: (usize, usize),
    /// Permutation p-value.
    pub p_value: f64,
    /// Permutations evaluated.
    pub permutations: usize,
    /// Exactly enumerated.
    pub exact: bool,
    /// Smallest attainable p-value.
    #[serde(rename = "smallest_possible_p")]
    pub min_p: f64,
    /// Generator seed.
    pub seed: u64,
    /// Exchangeability scheme, described.
    pub scheme: String,
    /// What was permuted.
    pub permute: Permute,
    /// Rows whose squared distance was negative and set to 0.
    pub clamped: usize,
    /// Each row's distance to its centroid.
    pub distances: Vec<RowDistance>,
    /// Pairwise comparisons, when asked for.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub pairs: Option<Vec<DispersionPair>>,
    /// Fingerprint of the matrix analysed.
    pub fingerprint: String,
    /// Notes for the user: the assembly's, then the analysis's own.
    pub notes: Vec<String>,
    /// How many of `notes` came from the assembly.
    #[serde(skip)]
    pub assembly_notes: usize,
}

impl Analysis for Spec {
    const KIND: &'static str = KIND;
    type Outcome = Outcome;

    fn seed(&self) -> Option<u64> {
        Some(self.seed)
    }

    fn run(&self, prepared: &Prepared, progress: &dyn Progress) -> Result<Outcome> {
        let m = &prepared.matrix;
        let groups = design::grouping(m, &self.by, "--by")?;
        let chosen = design::term_scheme(
            m,
            self.scheme,
            self.strata.as_deref(),
            &self.by,
            groups.codes(),
        )?;
        let opts = DispersionOptions {
            permutations: self.permutations,
            seed: self.seed,
            scheme: chosen.scheme.clone(),
            permute: self.permute,
        };
        let d = self.distance.compute(m)?;
        progress.stage("dispersion");
        let cb = |done: usize, total: usize| progress.update(done, total);
        let r = dispersion(&d, &groups, &opts, Some(&cb))
            .map_err(|e| WorkflowError::kernel("dispersion test", e, m))?;
        let pairs = if self.pairwise {
            progress.stage("pairwise dispersion tests");
            Some(
                dispersion_pairwise(&d, &groups, &opts, Some(&cb))
                    .map_err(|e| WorkflowError::kernel("pairwise dispersion tests", e, m))?,
            )
        } else {
            None
        };
        progress.finish();
        let mut notes = prepared.notes.clone();
        if r.clamped > 0 {
            notes.push(format!(
                "{} a negative squared distance to their centroid (the dissimilarity \
                 is not Euclidean), set to distance 0",
                match r.clamped {
                    1 => "1 row had".to_string(),
                    k => format!("{k} rows had"),
                }
            ));
        }
        let distances = m
            .samples
            .iter()
            .zip(groups.codes())
            .zip(&r.distances)
            .map(|((s, &c), &z)| RowDistance {
                label: s.label.clone(),
                group: groups.levels()[c].clone(),
                distance: z,
            })
            .collect();
        Ok(Outcome {
            n: m.samples.len(),
            by: self.by.clone(),
            strata: self.strata.clone(),
            design: vec![chosen],
            distance: self.distance.distance,
            transform: self.distance.transform,
            unit: prepared.unit(),
            groups: r.groups,
            f: r.f,
            df: r.df,
            p_value: r.p_value,
            permutations: r.permutations,
            exact: r.exact,
            min_p: r.min_p,
            seed: r.seed,
            scheme: r.scheme,
            permute: r.permute,
            clamped: r.clamped,
            distances,
            pairs,
            fingerprint: prepared.fingerprint(),
            assembly_notes: prepared.notes.len(),
            notes,
        })
    }
}

impl super::Outcome for Outcome {
    fn values(&self) -> Vec<(String, Option<f64>)> {
        let mut vals = vec![
            ("f".to_string(), Some(self.f)),
            ("p_value".to_string(), Some(self.p_value)),
        ];
        for g in &self.groups {
            vals.push((format!("{}.mean_distance", g.name), Some(g.mean_distance)));
        }
        for p in self.pairs.iter().flatten() {
            let key = format!("{} vs {}", p.a, p.b);
            vals.push((format!("{key}.f"), Some(p.f)));
            vals.push((format!("{key}.p_value"), Some(p.p_value)));
            vals.push((format!("{key}.p_holm"), Some(p.p_holm)));
        }
        vals
    }

    fn notes(&self) -> &[String] {
        &self.notes
    }
}
