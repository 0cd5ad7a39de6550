//! The invented Wren Valley demo: [`generate`] writes its data (a fixed-seed,
//! deterministic simulation), and the demo's analyses are built as typed specs
//! so that the demo, its report and `runs verify` run exactly the same
//! computations.
//!
//! Everything here is invented: a fictional catchment, invented coordinates and
//! invented counts.

pub mod generate;
pub mod scenario;

pub use generate::*;
