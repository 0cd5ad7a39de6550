//! End-to-end tests: one binary, driving the built `tally` on temporary stores.
mod distance_properties;
mod matrix_cli;
mod reference_distances;
mod reference_models;
mod import;
mod store_cli;
mod util;
mod demo_data;
mod architecture;
