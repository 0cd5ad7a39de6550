//! End-to-end tests: one binary, driving the built `tally` on temporary stores.
mod architecture;
mod citations;
mod compare;
mod demo_data;
mod distance_properties;
mod engine_cli;
mod import;
mod matrix_cli;
mod reference_distances;
mod reference_models;
mod report;
mod runs_cli;
mod store_cli;
mod taxa;
mod trend_cli;
mod util;
mod verify;
