//! End-to-end tests: one binary, driving the built `tally` on temporary stores.
mod reference_models;
mod store_cli;
mod util;
