//! End-to-end tests of `tally partition`, `tally compare` and `tally runs verify`.
