//! End-to-end tests: one binary, driving the built `tally` on temporary stores.
mod matrix_cli;
mod store_cli;
mod util;
