//! PERMANOVA of a selection's dissimilarities by one factor (Anderson 2001,
//! Austral Ecology 26:32–46), optionally with numeric covariates (multi-term
//! model, Freedman & Lane 1983 permutation of residuals) and permutations
//! restricted within strata; pairwise comparisons on request.
//!
//! Without covariates the one-way kernel is used (label permutation, exact
//! enumeration of distinct labelings when they are few); with covariates the
//! terms are the factor, then each covariate in order.

use serde::{Deserialize, Serialize};

use crate::analysis::dissimilarity::Distance;
use crate::analysis::linear_model::{Design, Grouping, SsType, Term, TermSpec};
use crate::analysis::permanova::{
    PairTest, PermanovaOptions, PermanovaResult, pairwise, permanova_by_term, permanova_oneway,
};
use crate::analysis::transform::Transform;

use super::design::{self, DistanceSpec, PermuteDesign, TermScheme};
use super::{Analysis, Prepared, Progress, Result, WorkflowError};

/// The run kind.
pub const KIND: &str = "permanova";

/// The caution given beside every PERMANOVA result.
pub const DISPERSION_CAUTION: &str = "PERMANOVA responds to differences in spread as well as \
     in location: groups with unequal dispersion can give a small p-value with identical \
     centroids. Run `tally dispersion` with the same flags beside it.";

/// What to compute.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Spec {
    /// The factor whose groups are compared (a built-in field or a site attribute).
    pub by: String,
    /// Numeric covariates added after the factor, in order.
    pub covariates: Vec<String>,
    /// Permute only within the levels of this field.
    pub strata: Option<String>,
    /// How rows are exchanged (runs stored before this choice existed were free).
    #[serde(default = "PermuteDesign::before_designs")]
    pub scheme: PermuteDesign,
    /// Also compare every pair of groups.
    pub pairwise: bool,
    /// Sums of squares of the multi-term model.
    pub ss: SsType,
    /// Dissimilarity and transform.
    #[serde(flatten)]
    pub distance: DistanceSpec,
    /// Random permutations per test.
    pub permutations: usize,
    /// Seed of the random streams.
    pub seed: u64,
}

/// A group's name and size.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct GroupSize {
    /// Group name (level of the factor).
    pub name: String,
    /// Rows in the group.
    pub n: usize,
}

impl GroupSize {
    /// Names and sizes of every group of `g`, in level order.
    pub fn of(g: &Grouping) -> Vec<GroupSize> {
        g.levels()
            .iter()
            .zip(g.sizes())
            .map(|(l, n)| GroupSize { name: l.clone(), n })
            .collect()
    }
}

/// What was computed.
#[derive(Debug, Clone, Serialize)]
pub struct Outcome {
    /// Rows analysed.
    pub n: usize,
    /// The factor.
    pub by: String,
    /// Numeric covariates, in model order.
    pub covariates: Vec<String>,
    /// The strata field, if permutations were restricted.
    pub strata: Option<String>,
    /// The scheme each term was tested under, and why.
    pub design: Vec<TermScheme>,
    /// The dissimilarity.
    pub distance: Distance,
    /// The transform applied before it.
    pub transform: Transform,
    /// What one row is.
    pub unit: crate::matrix::Unit,
    /// The groups of the factor.
    pub groups: Vec<GroupSize>,
    /// The PERMANOVA table.
    #[serde(flatten)]
    pub result: PermanovaResult,
    /// Pairwise comparisons, when asked for.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub pairs: Option<Vec<PairTest>>,
    /// Fingerprint of the matrix analysed.
    pub fingerprint: String,
    /// Notes for the user.
    pub notes: Vec<String>,
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
        let covariates = design::covariates(m, &self.covariates, Some(&self.by))?;
        let strata = self.strata.as_deref();
        let mut schemes = vec![design::term_scheme(
            m,
            self.scheme,
            strata,
            &self.by,
            groups.codes(),
        )?];
        for (name, v) in &covariates {
            schemes.push(design::term_scheme(m, self.scheme, strata, name, v)?);
        }
        let d = self.distance.compute(m)?;
        let opts = PermanovaOptions {
            permutations: self.permutations,
            seed: self.seed,
            scheme: schemes[0].scheme.clone(),
            ss_type: self.ss,
        };
        progress.stage("PERMANOVA");
        let cb = |done: usize, total: usize| progress.update(done, total);
        let mut result = if covariates.is_empty() {
            let mut r = permanova_oneway(&d, &groups, &opts, Some(&cb))
                .map_err(|e| WorkflowError::kernel("PERMANOVA", e, m))?;
            r.terms[0].name = self.by.clone();
            r
        } else {
            let mut terms = vec![Term::new(self.by.clone(), TermSpec::Factor(groups.clone()))];
            for (name, v) in covariates {
                terms.push(Term::new(name, TermSpec::Covariate(v)));
            }
            let design = Design::new(m.samples.len(), terms)
                .map_err(|e| WorkflowError::kernel("building the model", e, m))?;
            let per_term: Vec<_> = schemes.iter().map(|s| s.scheme.clone()).collect();
            permanova_by_term(&d, &design, &opts, &per_term, Some(&cb))
                .map_err(|e| WorkflowError::kernel("PERMANOVA", e, m))?
        };
        // The one-way path has no sequential/marginal distinction; report what was asked.
        result.ss_type = opts.ss_type;
        let pairs = if self.pairwise {
            progress.stage("pairwise PERMANOVA");
            Some(
                pairwise(&d, &groups, &opts, Some(&cb))
                    .map_err(|e| WorkflowError::kernel("pairwise PERMANOVA", e, m))?,
            )
        } else {
            None
        };
        progress.finish();
        let mut notes = prepared.notes.clone();
        notes.push(DISPERSION_CAUTION.to_string());
        if self.pairwise && !self.covariates.is_empty() {
            notes.push(
                "pairwise comparisons use the factor alone (covariates are not in the pairwise models)"
                    .to_string(),
            );
        }
        Ok(Outcome {
            n: m.samples.len(),
            by: self.by.clone(),
            covariates: self.covariates.clone(),
            strata: self.strata.clone(),
            design: schemes,
            distance: self.distance.distance,
            transform: self.distance.transform,
            unit: prepared.unit(),
            groups: GroupSize::of(&groups),
            result,
            pairs,
            fingerprint: prepared.fingerprint(),
            notes,
        })
    }
}

impl super::Outcome for Outcome {
    fn values(&self) -> Vec<(String, Option<f64>)> {
        let mut vals = Vec::new();
        for t in &self.result.terms {
            vals.push((format!("{}.pseudo_f", t.name), Some(t.pseudo_f)));
            vals.push((format!("{}.p_value", t.name), Some(t.p_value)));
            vals.push((format!("{}.r2", t.name), Some(t.r2)));
        }
        vals.push(("residual.ss".into(), Some(self.result.residual.ss)));
        vals.push(("total.ss".into(), Some(self.result.total.ss)));
        for p in self.pairs.iter().flatten() {
            let key = format!("{} vs {}", p.a, p.b);
            vals.push((format!("{key}.pseudo_f"), Some(p.pseudo_f)));
            vals.push((format!("{key}.p_value"), Some(p.p_value)));
            vals.push((format!("{key}.p_holm"), Some(p.p_holm)));
        }
        vals
    }

    fn notes(&self) -> &[String] {
        &self.notes
    }
}
