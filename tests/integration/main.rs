//! End-to-end tests: one binary, driving the built `tally` on temporary stores.
mod demo_data;
mod distance_properties;
mod matrix_cli;
mod reference_distances;
mod reference_models;
mod report;
mod store_cli;
mod util;
