//! From the store and a selection to the matrix an analysis runs on: the one
//! place that resolves saved selections and assembles a [`Prepared`] matrix.
//! Every analysis, the demo, the report and `runs verify` go through
//! [`prepare`], so a stored run's fingerprint is always the fingerprint of
//! the matrix this function returns for its stored selection.

use crate::matrix::assemble::assemble;
use crate::matrix::{CountMatrix, Unit};
use crate::store::{Selection, Store};

use super::Result;

/// A selection and the matrix assembled from it, ready for an analysis.
#[derive(Debug, Clone)]
pub struct Prepared {
    /// The effective selection (saved selection merged, validated, unit filled in).
    pub selection: Selection,
    /// The assembled count matrix.
    pub matrix: CountMatrix,
    /// Notes of the assembly (dropped rows, unrolled taxa…), for the user.
    pub notes: Vec<String>,
}

impl Prepared {
    /// The fingerprint of the matrix: what a stored run records and `runs verify` checks.
    pub fn fingerprint(&self) -> String {
        self.matrix.fingerprint()
    }

    /// The digests of the site attributes in force on the rows, key → SHA-256
    /// ([`CountMatrix::attribute_digests`]): stored with a run beside the
    /// fingerprint.
    pub fn attribute_digests(&self) -> std::collections::BTreeMap<String, String> {
        self.matrix.attribute_digests()
    }

    /// First and last event dates covered by the matrix (ISO 8601).
    pub fn period(&self) -> (Option<String>, Option<String>) {
        let s = &self.matrix.samples;
        (
            s.iter().map(|r| r.first_date.clone()).min(),
            s.iter().map(|r| r.last_date.clone()).max(),
        )
    }

    /// What one row is, for people (`site-year`).
    pub fn unit(&self) -> Unit {
        self.selection.unit()
    }
}

/// The effective selection: the saved selection `saved` (if named) with the
/// explicitly given flags applied over it ([`Selection::merge`]), validated,
/// with the unit filled in (`event` when none is given).
///
/// # Errors
/// An unknown saved selection; an invalid flag value.
pub fn resolve(store: &Store, saved: Option<&str>, explicit: &Selection) -> Result<Selection> {
    let mut sel = match saved {
        Some(name) => Selection::merge(&store.selection(name)?, explicit),
        None => explicit.clone(),
    };
    sel.validate()?;
    sel.unit.get_or_insert(Unit::Event);
    Ok(sel)
}

/// Assemble the matrix of an effective selection.
///
/// # Errors
/// An empty selection (naming the filter), unknown codes, assembly errors.
pub fn prepare(store: &Store, selection: &Selection) -> Result<Prepared> {
    let mut selection = selection.clone();
    selection.unit.get_or_insert(Unit::Event);
    let records = store.select_records(&selection)?;
    let matrix = assemble(&records, &selection.assembly_options())?;
    let notes = matrix.notes.clone();
    Ok(Prepared {
        selection,
        matrix,
        notes,
    })
}
