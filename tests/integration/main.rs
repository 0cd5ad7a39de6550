//! End-to-end tests: one binary, driving the built `tally` on temporary stores.
mod util;
mod store_cli;
mod reference_distances;
mod distance_properties;
