//! Unit tests of the field parsers and of whole imports on in-memory stores.
use super::*;

#[test]
fn placeholder_compiles() {}
