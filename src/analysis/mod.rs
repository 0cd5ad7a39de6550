//! Pure numerical kernels: transforms, dissimilarities, Gower centring and
//! PCoA, distance-based linear models, permutation tests, PERMANOVA,
//! dispersion, the size test, the size/shape partition, ordination, trends,
//! the log-linear count model.
//!
//! Contract: no I/O, no SQLite, no clap, no printing. Kernels take matrices
//! (`nalgebra::DMatrix<f64>`, samples in rows) and return typed results.
//! Everything random takes a seed. Formulas and sources: `docs/methods.md`.

pub mod baci;
pub mod cca_test;
pub mod count_model;
pub mod dispersion;
pub mod dissimilarity;
pub mod diversity;
pub mod ellipse;
pub mod error;
pub mod gower;
pub mod linear_model;
pub mod ordination;
mod pairwise;
pub mod partition;
pub mod permanova;
pub mod permutation;
pub mod prec;
pub mod rarefy;
pub mod size_test;
pub mod taxa;
pub mod transform;
pub mod trend;

pub use dissimilarity::{Distance, DistanceMatrix};
pub use error::AnalysisError;
pub use gower::{Correction, Pcoa, pcoa};
pub use transform::Transform;
