//! Tables and CSV of typed outcomes, one file per analysis. Renderers take an
//! outcome and `&mut dyn Write`; they know nothing of the store or the command
//! line. JSON needs no renderer: it is the outcome's own serialisation.

use std::io::{self, Write};

pub mod compare;
pub mod dispersion;
pub mod distances;
pub mod matrix;
pub mod ordinate;
pub mod partition;
pub mod permanova;
pub mod runs;
pub mod trend;
pub mod verify;

/// An outcome that can be printed as a table for people and as CSV for scripts.
pub trait Render {
    /// The table (and the lines around it) for people.
    ///
    /// # Errors
    /// I/O errors.
    fn table(&self, out: &mut dyn Write) -> io::Result<()>;

    /// The CSV layout documented for the command.
    ///
    /// # Errors
    /// I/O errors.
    fn csv(&self, out: &mut dyn Write) -> io::Result<()>;
}

/// The `name n, name n, …` line of group sizes.
pub fn groups_line<'a>(groups: impl IntoIterator<Item = (&'a str, usize)>) -> String {
    groups
        .into_iter()
        .map(|(l, n)| format!("{l} {n}"))
        .collect::<Vec<_>>()
        .join(", ")
}

/// The `permutations: N (exact enumeration|random), scheme: S, seed: K` part of
/// the line under every permutation test's table.
pub fn permutations_line(permutations: usize, exact: bool, scheme: &str, seed: u64) -> String {
    format!(
        "permutations: {permutations} ({}), scheme: {scheme}, seed: {seed}",
        if exact { "exact enumeration" } else { "random" }
    )
}
