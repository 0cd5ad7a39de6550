//! End-to-end tests: one binary, driving the built `tally` on temporary stores.
mod compare;
mod demo_data;
mod distance_properties;
mod engine_cli;
mod matrix_cli;
mod reference_distances;
mod reference_models;
mod import;
mod report;
mod store_cli;
mod trend_cli;
mod util;
mod architecture;
