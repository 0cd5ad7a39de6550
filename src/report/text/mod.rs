//! Tables and CSV of typed outcomes, one file per analysis. Renderers take an
//! outcome and `&mut dyn Write`; they know nothing of the store or the command
//! line. JSON needs no renderer: it is the outcome's own serialisation.

use std::io::{self, Write};

pub mod compare;
pub mod dispersion;
pub mod distances;
pub mod diversity;
pub mod impact;
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

/// The significance level against which the design lines of commands without an
/// `--alpha` judge the smallest possible p-value (the customary 0.05; common practice).
pub const DESIGN_ALPHA: f64 = 0.05;

/// One line per tested term: the scheme it was tested under and why, then, when the
/// smallest p-value the design can give (`smallest`, one per term in the same order)
/// exceeds `alpha`, a line saying that this design cannot reach alpha.
pub fn design_lines(
    design: &[crate::workflow::design::TermScheme],
    smallest: &[f64],
    alpha: f64,
) -> Vec<String> {
    let mut out = Vec::new();
    for (t, &p) in design.iter().zip(smallest) {
        out.push(format!(
            "{}: {} permutation ({})",
            t.term, t.permute, t.reason
        ));
        if p > alpha {
            out.push(format!(
                "{}: this design cannot reach p ≤ {alpha}: the smallest possible p-value is {}; \
                 a p-value above {alpha} here says nothing about the effect. More sites (or \
                 years) are needed for a verdict",
                t.term,
                crate::report::format::fmt_num(p),
            ));
        }
    }
    out
}

/// The `permutations: N (exact enumeration|random), scheme: S, seed: K` part of
/// the line under every permutation test's table.
pub fn permutations_line(permutations: usize, exact: bool, scheme: &str, seed: u64) -> String {
    format!(
        "permutations: {permutations} ({}), scheme: {scheme}, seed: {seed}",
        if exact { "exact enumeration" } else { "random" }
    )
}
