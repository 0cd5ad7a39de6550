//! Output: terminal tables, CSV and JSON writers, SVG plots, the HTML report.
//! Everything writes to `impl Write`; nothing here computes statistics.

pub mod format;
pub mod html;
pub mod input;
pub mod svg;
pub mod text;

pub use format::OutputFormat;
