//! Import benchmark (filled in by the store work).
fn main() {}
