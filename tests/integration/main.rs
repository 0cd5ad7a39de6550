//! End-to-end tests: one binary, driving the built `tally` on temporary stores.
mod import;
mod store_cli;
mod util;
