//! The workflow layer's errors: every refusal an analysis can make is a
//! variant carrying the data a user needs, and kernel errors that name matrix
//! rows are mapped to the sample labels of those rows.

use crate::analysis::AnalysisError;
use crate::matrix::{CountMatrix, MatrixError};
use crate::store::StoreError;

/// Result alias of the workflow layer.
pub type Result<T, E = WorkflowError> = std::result::Result<T, E>;

/// Why a workflow could not produce its outcome.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum WorkflowError {
    /// The store refused (SQLite, an unknown saved selection, an empty selection…).
    #[error(transparent)]
    Store(#[from] StoreError),
    /// The matrix could not be assembled or reshaped.
    #[error(transparent)]
    Matrix(#[from] MatrixError),
    /// A field named by an option is unknown or not defined for every row.
    #[error("{option} {field}: {cause}")]
    Field {
        /// The option that named the field (`--by`, `--strata`…).
        option: &'static str,
        /// The field as given.
        field: String,
        /// Why it cannot be used (in the message, not chained as a source, so
        /// that the reason is printed once).
        cause: MatrixError,
    },
    /// The strata are the factor under test: no sample could change group.
    #[error("--strata {field}: the strata cannot be the --by field (no sample could change group)")]
    StrataIsFactor {
        /// The field.
        field: String,
    },
    /// A field is named twice in one model.
    #[error("{option} {field}: the field is already in the model")]
    AlreadyInModel {
        /// The option that repeated it.
        option: &'static str,
        /// The field.
        field: String,
    },
    /// An option value that the analysis cannot use, with the reason.
    #[error("{option}: {reason}")]
    Invalid {
        /// The option (`--rarefy`, `--baseline`…).
        option: &'static str,
        /// Why the value cannot be used.
        reason: String,
    },
    /// The data do not allow the analysis, with the reason and what to do instead.
    #[error("{0}")]
    Refused(String),
    /// Samples with no organisms where the computation needs a composition.
    #[error(
        "{what}: sample(s) with no organisms: {}; their composition is undefined \
         (leave them out with the selection flags, or choose a dissimilarity that accepts empty samples)",
        labels.join(", ")
    )]
    EmptySamples {
        /// The computation that refused.
        what: String,
        /// Labels of the empty rows.
        labels: Vec<String>,
    },
    /// A kernel refused.
    #[error("{what}: {cause}")]
    Kernel {
        /// The computation that refused (`PERMANOVA`, `computing bray-curtis dissimilarities`…).
        what: String,
        /// The kernel's error (in the message, not chained as a source).
        cause: AnalysisError,
    },
    /// One group of a split analysis failed.
    #[error("trend of group {value} ({field}): {source}")]
    InGroup {
        /// The split field.
        field: String,
        /// The group's value.
        value: String,
        /// Why it failed.
        #[source]
        source: Box<WorkflowError>,
    },
    /// A stored run cannot be replayed.
    #[error("run {id} cannot be replayed: {reason}")]
    NotReplayable {
        /// Run id.
        id: i64,
        /// Why.
        reason: String,
    },
    /// A spec or outcome could not be written or read as JSON.
    #[error("JSON: {0}")]
    Json(#[from] serde_json::Error),
}

impl WorkflowError {
    /// A kernel error, with row indices replaced by the labels of `m`'s rows
    /// where the error names rows.
    pub fn kernel(what: impl Into<String>, source: AnalysisError, m: &CountMatrix) -> Self {
        let what = what.into();
        match &source {
            AnalysisError::EmptySamples { rows } => {
                let labels = rows
                    .iter()
                    .map(|&r| {
                        m.samples
                            .get(r)
                            .map_or_else(|| format!("row {r}"), |s| s.label.clone())
                    })
                    .collect();
                WorkflowError::EmptySamples { what, labels }
            }
            _ => WorkflowError::Kernel {
                what,
                cause: source,
            },
        }
    }
}
