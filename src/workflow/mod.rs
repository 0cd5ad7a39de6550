//! The application: one file per analysis, each with a typed, serialisable
//! [`Analysis`] spec and a typed outcome; [`prepare`] (store + selection →
//! matrix), [`design`] (groups, strata, schemes, periods: one rule each),
//! [`runs`] (save in one transaction, replay any stored run in-process) and
//! [`error`].
//!
//! This layer has no clap, no printing, no `std::env` and no `std::process`
//! (checked by `tests/integration/architecture.rs`). The command line, the
//! demo, the report and `runs verify` all build a spec, [`prepare`] the
//! selection and call [`Analysis::run`]; what they print or draw is rendered
//! from the typed outcome by `report`.

use std::fmt::Debug;

use serde::de::DeserializeOwned;
use serde::{Deserialize, Serialize};

pub mod command;
pub mod compare;
pub mod design;
pub mod dispersion;
pub mod diversity;
pub mod error;
pub mod impact;
pub mod ordinate;
pub mod partition;
pub mod permanova;
pub mod prepare;
pub mod report;
pub mod runs;
pub mod summary;
pub mod trend;

pub use error::{Result, WorkflowError};
pub use prepare::{Prepared, prepare, resolve};

/// Where a long computation reports how far it is. The command line draws a
/// bar on a terminal; the demo, the report and tests pass [`Silent`].
pub trait Progress: Sync {
    /// A new stage begins (`PERMANOVA`, `pairwise tests`…).
    fn stage(&self, _what: &str) {}
    /// `done` of `total` steps of the current stage are finished.
    fn update(&self, done: usize, total: usize);
    /// The computation is over.
    fn finish(&self) {}
}

/// Progress that goes nowhere.
#[derive(Debug, Clone, Copy, Default)]
pub struct Silent;

impl Progress for Silent {
    fn update(&self, _done: usize, _total: usize) {}
}

/// One analysis: a serialisable spec that fully determines the computation on a
/// prepared matrix (seed included), and the typed outcome it produces.
pub trait Analysis: Serialize + DeserializeOwned + Clone + Debug + Into<AnalysisSpec> {
    /// The kind of run stored (`permanova`, `compare`…); equal to the spec's tag in
    /// [`AnalysisSpec`].
    const KIND: &'static str;
    /// What the analysis produces.
    type Outcome: Outcome;

    /// Run the analysis on a prepared matrix.
    ///
    /// # Errors
    /// The analysis's refusals, as [`WorkflowError`] variants.
    fn run(&self, prepared: &Prepared, progress: &dyn Progress) -> Result<Self::Outcome>;

    /// The seed of the random streams, when the analysis draws any.
    fn seed(&self) -> Option<u64>;
}

/// What every outcome offers besides its fields.
pub trait Outcome: Serialize + Debug {
    /// Headline numbers stored one per row with the run, so they can be followed
    /// across runs (`None` for a value that could not be computed).
    fn values(&self) -> Vec<(String, Option<f64>)>;

    /// Notes for the user (assembly notes first, then the analysis's own).
    fn notes(&self) -> &[String];
}

/// Declares the closed set of analyses: the spec enum stored as a run's
/// parameters (tagged by kind), the outcome enum, and their dispatch.
macro_rules! analyses {
    ($($variant:ident => $module:ident),* $(,)?) => {
        /// Every analysis spec, tagged by kind: what a stored run keeps as its parameters.
        #[derive(Debug, Clone, Serialize, Deserialize)]
        #[serde(tag = "kind", rename_all = "kebab-case")]
        pub enum AnalysisSpec {
            $(
                #[doc = concat!("See [`", stringify!($module), "`].")]
                $variant($module::Spec),
            )*
        }

        /// Every analysis outcome.
        #[derive(Debug, Serialize)]
        #[serde(untagged)]
        pub enum AnalysisOutcome {
            $(
                #[doc = concat!("See [`", stringify!($module), "`].")]
                $variant($module::Outcome),
            )*
        }

        $(
            impl From<$module::Spec> for AnalysisSpec {
                fn from(s: $module::Spec) -> Self {
                    AnalysisSpec::$variant(s)
                }
            }
        )*

        impl AnalysisSpec {
            /// The kind of run.
            pub fn kind(&self) -> &'static str {
                match self {
                    $(AnalysisSpec::$variant(_) => <$module::Spec as Analysis>::KIND,)*
                }
            }

            /// The seed of the random streams, if any.
            pub fn seed(&self) -> Option<u64> {
                match self {
                    $(AnalysisSpec::$variant(s) => s.seed(),)*
                }
            }

            /// Run the analysis on a prepared matrix.
            ///
            /// # Errors
            /// As [`Analysis::run`].
            pub fn run(&self, prepared: &Prepared, progress: &dyn Progress) -> Result<AnalysisOutcome> {
                match self {
                    $(AnalysisSpec::$variant(s) => s.run(prepared, progress).map(AnalysisOutcome::$variant),)*
                }
            }

            /// Every kind, for documentation and tests.
            pub const KINDS: &'static [&'static str] = &[$(<$module::Spec as Analysis>::KIND),*];
        }

        impl AnalysisOutcome {
            /// Headline numbers (see [`Outcome::values`]).
            pub fn values(&self) -> Vec<(String, Option<f64>)> {
                match self {
                    $(AnalysisOutcome::$variant(o) => o.values(),)*
                }
            }

            /// Notes (see [`Outcome::notes`]).
            pub fn notes(&self) -> &[String] {
                match self {
                    $(AnalysisOutcome::$variant(o) => o.notes(),)*
                }
            }
        }
    };
}

analyses! {
    Permanova => permanova,
    Dispersion => dispersion,
    Ordinate => ordinate,
    Trend => trend,
    Partition => partition,
    Compare => compare,
    Impact => impact,
    Diversity => diversity,
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_kind_is_its_serde_tag() {
        // The kind stored in a run's `kind` column and the tag inside its
        // parameters must be one name, or a stored spec would not replay.
        for kind in AnalysisSpec::KINDS {
            let wrong = serde_json::json!({"kind": kind});
            let err = serde_json::from_value::<AnalysisSpec>(wrong)
                .err()
                .map(|e| e.to_string())
                .unwrap_or_default();
            assert!(
                !err.contains("unknown variant"),
                "kind {kind} is not a tag of AnalysisSpec: {err}"
            );
        }
    }
}
