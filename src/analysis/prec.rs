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

/// True unless `x` is a number greater than zero: the NaN-aware guard of the
/// kernels (`NaN` is not positive, so it is refused like zero or a negative
/// value, where `x <= 0.0` would let it through).
#[inline]
pub fn not_positive(x: f64) -> bool {
    x.is_nan() || x <= 0.0
}
/// Quantile `q` of sorted, non-empty data by linear interpolation between order
/// statistics (`h = (n − 1) q`; Hyndman & Fan 1996, Am. Stat. 50:361-365, their
/// type 7, the default of NumPy's `quantile`): the one quantile rule of the
/// bootstrap and permutation intervals and of the box plots.
pub fn quantile(sorted: &[f64], q: f64) -> f64 {
    let h = (sorted.len() - 1) as f64 * q;
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(sorted.len() - 1);
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

/// Small published or documented inputs shared by the kernels' unit tests.
#[cfg(test)]
pub(crate) mod test_data {
    use nalgebra::DMatrix;

    /// Legendre & Legendre (1998) Numerical Ecology, 2nd Engl. ed., p. 457 (page as
    /// cited by Legendre & Gallagher 2001, not checked against the book): the 3 × 3
    /// input table (sites × species); docs/methods.md, "Legendre & Legendre's 3 × 3 table".
    pub(crate) fn ll457() -> DMatrix<f64> {
        DMatrix::from_row_slice(3, 3, &[10., 10., 20., 10., 15., 10., 15., 5., 5.])
    }

    /// The toy community invented for the tests (docs/methods.md, "The toy community"):
    /// 10 samples × 6 taxa, group A = rows 0-4, group B = rows 5-9.
    pub(crate) const TOY: [[f64; 6]; 10] = [
        [12., 5., 0., 3., 1., 0.],
        [20., 8., 1., 5., 0., 2.],
        [9., 4., 0., 1., 2., 0.],
        [15., 6., 2., 4., 1., 1.],
        [30., 12., 1., 7., 3., 0.],
        [3., 2., 8., 1., 9., 4.],
        [1., 4., 12., 0., 6., 7.],
        [5., 1., 6., 2., 11., 3.],
        [2., 3., 15., 1., 8., 9.],
        [0., 2., 5., 0., 4., 2.],
    ];

    /// [`TOY`] as a matrix.
    pub(crate) fn toy() -> DMatrix<f64> {
        DMatrix::from_fn(10, 6, |i, j| TOY[i][j])
    }
}
