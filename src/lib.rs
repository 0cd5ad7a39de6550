//! tally: size and shape of community change for long-term biological monitoring.
//!
//! One SQLite file (the *store*) holds a monitoring program's sites, sampling
//! events, effort, taxa and counts. Selections of the store become count
//! matrices ([`matrix`]); pure numerical kernels ([`analysis`]) split community
//! differences into a *size* part (how many organisms) and a *shape* part
//! (which taxa, in what proportions) and test each; results are stored as runs.
//!
//! Module arrows point one way: `cli` → `workflow` → `store`, `matrix`, `analysis`;
//! `report` renders typed outcomes of `workflow`. `analysis` and `matrix` know
//! nothing of SQLite, clap or the terminal; `workflow` knows nothing of clap or
//! the terminal.
#![forbid(unsafe_code)]
#![warn(missing_docs)]

pub mod analysis;
pub mod cli;
pub mod demo;
pub mod dwca;
pub mod matrix;
pub mod report;
pub mod store;
pub mod words;
pub mod workflow;

/// The tool version recorded with every stored run.
pub const VERSION: &str = env!("CARGO_PKG_VERSION");
