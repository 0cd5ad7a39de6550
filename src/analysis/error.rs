//! Errors of the analysis kernels. Messages are lowercase and context-free.

/// Errors raised by analysis kernels.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum AnalysisError {
    /// Two inputs disagree in size.
    #[error("dimension mismatch: expected {expected}, found {found}")]
    DimensionMismatch {
        /// Expected length.
        expected: usize,
        /// Length found.
        found: usize,
    },
    /// A value is NaN or infinite.
    #[error("non-finite value at row {row}, column {col}")]
    NonFinite {
        /// Row index (0-based).
        row: usize,
        /// Column index (0-based).
        col: usize,
    },
    /// A value is negative where counts are expected.
    #[error("negative value at row {row}, column {col}")]
    Negative {
        /// Row index (0-based).
        row: usize,
        /// Column index (0-based).
        col: usize,
    },
    /// Samples whose every count is zero, where the method needs a total.
    #[error("sample(s) with no organisms at rows {rows:?}: their composition is undefined")]
    EmptySamples {
        /// Row indices (0-based).
        rows: Vec<usize>,
    },
    /// Taxa whose every count is zero, where the method divides by column totals.
    #[error("taxa with no organisms at columns {cols:?}")]
    EmptyTaxa {
        /// Column indices (0-based).
        cols: Vec<usize>,
    },
    /// Too few samples for the method.
    #[error("too few samples: found {found}, need at least {min}")]
    TooFewSamples {
        /// Number found.
        found: usize,
        /// Minimum needed.
        min: usize,
    },
    /// Too few groups for the method.
    #[error("too few groups: found {found}, need at least {min}")]
    TooFewGroups {
        /// Number found.
        found: usize,
        /// Minimum needed.
        min: usize,
    },
    /// Too few distinct years for a trend.
    #[error(
        "too few years: the rows cover {found} year(s), a trend needs at least {min}; widen the years of the selection"
    )]
    TooFewYears {
        /// Distinct years found.
        found: usize,
        /// Minimum needed.
        min: usize,
    },
    /// A group has too few members.
    #[error("group {group} has {found} sample(s), need at least {min}")]
    GroupTooSmall {
        /// Group index.
        group: usize,
        /// Members found.
        found: usize,
        /// Minimum needed.
        min: usize,
    },
    /// The model leaves no residual degrees of freedom.
    #[error(
        "too few samples for the model: it has {rank} columns (the intercept, the groups, sites or years it must separate) and there are {n} samples, so nothing is left to measure the scatter against; add samples or use a simpler design"
    )]
    Saturated {
        /// Rank of the full design including the intercept.
        rank: usize,
        /// Number of samples.
        n: usize,
    },
    /// A design has no columns beyond what the reduced model already spans.
    #[error("the term adds nothing to the model (zero degrees of freedom)")]
    EmptyTerm,
    /// An eigen-decomposition or factorisation did not converge.
    #[error("numerical failure: {0}")]
    Numerical(String),
    /// An argument is out of range.
    #[error("invalid argument {name}: {reason}")]
    InvalidArgument {
        /// Argument name.
        name: &'static str,
        /// Why it is invalid.
        reason: String,
    },
    /// Block permutation needs blocks of equal size.
    #[error("blocks of unequal size cannot be permuted as wholes (sizes {sizes:?})")]
    UnequalBlocks {
        /// Block sizes.
        sizes: Vec<usize>,
    },
}
