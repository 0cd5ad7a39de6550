//! End-to-end tests: one binary, driving the built `tally` on temporary stores.
mod distance_properties;
mod reference_distances;
mod matrix_cli;
mod store_cli;
mod util;
