//! Errors of matrix assembly and of field resolution. Messages are lowercase
//! and carry what the user needs to correct the request.

/// Errors raised while assembling a matrix or resolving a field name.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum MatrixError {
    /// `--per-effort` over events whose protocols measure effort in different units.
    #[error(
        "--per-effort cannot mix effort units ({}); select one protocol with --protocol",
        .units.join(", ")
    )]
    MixedEffortUnits {
        /// The units found, in byte order.
        units: Vec<String>,
    },
    /// `--rank` names a rank no taxon has.
    #[error("no taxon has rank '{rank}' (ranks present: {})", .available.join(", "))]
    UnknownRank {
        /// The rank asked for.
        rank: String,
        /// The ranks present in the taxonomy.
        available: Vec<String>,
    },
    /// `--identified-only` with a rank that is not in the rank order: which
    /// taxa are above it cannot be told.
    #[error(
        "--identified-only: the rank '{rank}' is not in the rank order (docs/taxonomy.md), so \
         which taxa are recorded above it cannot be told; roll up to a rank of the order"
    )]
    RankNotInOrder {
        /// The rank asked for.
        rank: String,
    },
    /// The synonym or parent chain of a taxon loops.
    #[error("the {chain} chain of taxon '{name}' loops (`tally check` names the loop)")]
    TaxonCycle {
        /// Taxon name.
        name: String,
        /// `accepted` or `parent`.
        chain: &'static str,
    },
    /// A count names a taxon id that is not in the taxon list.
    #[error("count of event {event} names unknown taxon id {taxon}")]
    UnknownTaxon {
        /// Event id.
        event: i64,
        /// Taxon id.
        taxon: i64,
    },
    /// A date is not ISO 8601 `YYYY-MM-DD`.
    #[error("event '{event}' has a date that is not YYYY-MM-DD: '{date}'")]
    BadDate {
        /// Event code.
        event: String,
        /// The date text.
        date: String,
    },
    /// Nothing is left after assembly.
    #[error("the matrix is empty: {why}")]
    Empty {
        /// Which step left nothing.
        why: String,
    },
    /// A field name that is neither built in nor a site attribute.
    #[error("unknown field '{name}' (available: {})", .available.join(", "))]
    UnknownField {
        /// The name asked for.
        name: String,
        /// The names available for this matrix.
        available: Vec<String>,
    },
    /// A field is known but has no single value for some row.
    #[error("field '{field}' is not defined for row {label}: {why}")]
    FieldUnavailable {
        /// The field.
        field: String,
        /// The first row concerned.
        label: String,
        /// Why.
        why: String,
    },
    /// A field used as a number holds text.
    #[error("field '{field}' is not numeric for row {label}: '{value}'")]
    NotNumeric {
        /// The field.
        field: String,
        /// The row.
        label: String,
        /// The value found.
        value: String,
    },
}
