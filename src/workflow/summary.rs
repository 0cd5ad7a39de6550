//! What the store holds, typed: the totals, years, protocols and the site ×
//! year coverage grid that `tally summary` prints and the report shows.

pub use crate::store::summary::{ProtocolSummary, SiteCoverage, Summary};

use crate::store::Store;

use super::Result;

/// The summary of the store's content.
///
/// # Errors
/// SQLite errors.
pub fn summary(store: &Store) -> Result<Summary> {
    Ok(store.summary()?)
}
