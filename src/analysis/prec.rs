//! Tolerance constants shared by kernels and tests.

/// Relative tolerance below which an eigenvalue counts as zero (`|λ| <= EIG_ZERO * max|λ|`).
pub const EIG_ZERO: f64 = 1e-10;
/// Relative tolerance for rank detection of design matrices (`s_i > RANK_TOL * s_max`).
pub const RANK_TOL: f64 = 1e-10;
/// Relative tolerance when comparing a permuted statistic with the observed one
/// (a permuted statistic counts as "at least as large" when `f* >= f * (1 - TIE_TOL)`).
pub const TIE_TOL: f64 = 1e-9;

/// True when `a` and `b` agree to relative tolerance `rel` (absolute near zero).
pub fn close(a: f64, b: f64, rel: f64) -> bool {
    let scale = a.abs().max(b.abs()).max(1.0);
    (a - b).abs() <= rel * scale
}
