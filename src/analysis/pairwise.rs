//! Low-level pairwise kernels behind [`super::dissimilarity::Distance`]: a
//! row-major padded copy of the data, vectorisable inner loops (eight
//! independent accumulators over fixed-size chunks, `as_chunks::<8>`), and a tiled parallel driver
//! that fills a condensed matrix.
//!
//! Determinism: each pair is computed by one sequential call of the same inner
//! loop, whatever the thread that runs it, so results are bit-identical on any
//! number of threads. Pure: no I/O.

use nalgebra::DMatrix;
use rayon::prelude::*;

/// Width of the inner-loop chunks; rows are zero-padded to a multiple of it.
/// Zero padding changes none of the sums below (min(0,0) = |0-0| = 0·0 = 0).
pub(crate) const LANES: usize = 8;

/// Rows per tile: a tile of rows i and a tile of rows j stay in L2 cache together
/// for the usual taxa counts (64 rows × 200 taxa × 8 bytes = 100 kB).
const TILE: usize = 64;

/// Samples × taxa data copied row-major into one contiguous buffer.
pub(crate) struct RowMajor {
    n: usize,
    stride: usize,
    data: Vec<f64>,
}

impl RowMajor {
    /// Copy `x` (column-major nalgebra storage) into padded row-major form.
    pub(crate) fn new(x: &DMatrix<f64>) -> Self {
        let (n, p) = x.shape();
        let stride = p.div_ceil(LANES).max(1) * LANES;
        let mut data = vec![0.0; n * stride];
        for (j, col) in x.column_iter().enumerate() {
            for (i, v) in col.iter().enumerate() {
                data[i * stride + j] = *v;
            }
        }
        RowMajor { n, stride, data }
    }

    /// Row i, padded.
    #[inline]
    pub(crate) fn row(&self, i: usize) -> &[f64] {
        &self.data[i * self.stride..(i + 1) * self.stride]
    }

    /// Per-row sums, computed with the same chunked loop as the pair kernels.
    pub(crate) fn row_sums(&self) -> Vec<f64> {
        (0..self.n).map(|i| sum(self.row(i))).collect()
    }

    /// Per-row sums of squares.
    pub(crate) fn row_sq_norms(&self) -> Vec<f64> {
        (0..self.n).map(|i| dot(self.row(i), self.row(i))).collect()
    }
}

/// Fill the condensed (pdist-order) vector of `f(i, j)` for all i < j < n, in
/// parallel over tiles of rows. Each output entry is written by exactly one call.
pub(crate) fn condensed<F>(n: usize, f: F) -> Vec<f64>
where
    F: Fn(usize, usize) -> f64 + Sync,
{
    by_row_blocks(n, TILE, |i0, block| {
        let mut j0 = i0 + 1;
        while j0 < n {
            let j1 = (j0 + TILE).min(n);
            for (di, seg) in block.iter_mut().enumerate() {
                let i = i0 + di;
                for j in j0.max(i + 1)..j1 {
                    seg[j - i - 1] = f(i, j);
                }
            }
            j0 = j1;
        }
    })
}

/// The condensed vector for n samples, filled by `fill(i0, segments)` in parallel
/// over blocks of `block` consecutive rows: `segments[di]` is the output of row
/// `i0 + di`, i.e. the pairs `(i0 + di, i0 + di + 1 .. n)`. Block boundaries do
/// not depend on the thread count.
pub(crate) fn by_row_blocks<F>(n: usize, block: usize, fill: F) -> Vec<f64>
where
    F: Fn(usize, &mut [&mut [f64]]) + Sync,
{
    let mut out = vec![0.0; n * n.saturating_sub(1) / 2];
    let mut rows: Vec<&mut [f64]> = Vec::with_capacity(n);
    let mut rest: &mut [f64] = &mut out;
    for i in 0..n {
        let (head, tail) = rest.split_at_mut(n - i - 1);
        rows.push(head);
        rest = tail;
    }
    rows.par_chunks_mut(block.max(1))
        .enumerate()
        .for_each(|(b, segs)| fill(b * block.max(1), segs));
    out
}

/// `Σ a`, eight accumulators.
#[inline]
pub(crate) fn sum(a: &[f64]) -> f64 {
    let mut acc = [0.0f64; LANES];
    for ca in a.as_chunks::<LANES>().0 {
        for k in 0..LANES {
            acc[k] += ca[k];
        }
    }
    reduce(acc)
}

/// `Σ min(a, b)`; inputs are finite (validated), so the plain comparison is a
/// single SIMD min instruction.
#[inline]
pub(crate) fn sum_min(a: &[f64], b: &[f64]) -> f64 {
    let mut acc = [0.0f64; LANES];
    for (ca, cb) in a
        .as_chunks::<LANES>()
        .0
        .iter()
        .zip(b.as_chunks::<LANES>().0)
    {
        for k in 0..LANES {
            acc[k] += if ca[k] < cb[k] { ca[k] } else { cb[k] };
        }
    }
    reduce(acc)
}

/// `Σ |a - b|`.
#[inline]
pub(crate) fn sum_abs_diff(a: &[f64], b: &[f64]) -> f64 {
    let mut acc = [0.0f64; LANES];
    for (ca, cb) in a
        .as_chunks::<LANES>()
        .0
        .iter()
        .zip(b.as_chunks::<LANES>().0)
    {
        for k in 0..LANES {
            acc[k] += (ca[k] - cb[k]).abs();
        }
    }
    reduce(acc)
}

/// `(Σ (a - b)⁺, Σ (b - a)⁺)`: what each sample has beyond the shared part.
#[inline]
pub(crate) fn sum_excess(a: &[f64], b: &[f64]) -> (f64, f64) {
    let mut pa = [0.0f64; LANES];
    let mut pb = [0.0f64; LANES];
    for (ca, cb) in a
        .as_chunks::<LANES>()
        .0
        .iter()
        .zip(b.as_chunks::<LANES>().0)
    {
        for k in 0..LANES {
            let d = ca[k] - cb[k];
            pa[k] += if d > 0.0 { d } else { 0.0 };
            pb[k] += if d < 0.0 { -d } else { 0.0 };
        }
    }
    (reduce(pa), reduce(pb))
}

/// `Σ (a - b)²`.
#[inline]
pub(crate) fn sum_sq_diff(a: &[f64], b: &[f64]) -> f64 {
    let mut acc = [0.0f64; LANES];
    for (ca, cb) in a
        .as_chunks::<LANES>()
        .0
        .iter()
        .zip(b.as_chunks::<LANES>().0)
    {
        for k in 0..LANES {
            let d = ca[k] - cb[k];
            acc[k] += d * d;
        }
    }
    reduce(acc)
}

/// `Σ a·b`.
#[inline]
pub(crate) fn dot(a: &[f64], b: &[f64]) -> f64 {
    let mut acc = [0.0f64; LANES];
    for (ca, cb) in a
        .as_chunks::<LANES>()
        .0
        .iter()
        .zip(b.as_chunks::<LANES>().0)
    {
        for k in 0..LANES {
            acc[k] += ca[k] * cb[k];
        }
    }
    reduce(acc)
}

/// Fixed-order pairwise reduction of the accumulators.
#[inline]
fn reduce(acc: [f64; LANES]) -> f64 {
    ((acc[0] + acc[4]) + (acc[1] + acc[5])) + ((acc[2] + acc[6]) + (acc[3] + acc[7]))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn condensed_visits_every_pair_once_in_pdist_order() {
        // common practice, no source: pdist order (0,1),(0,2),…,(1,2),…; sizes
        // straddle the tile width to exercise partial tiles.
        for n in [0usize, 1, 2, 3, 63, 64, 65, 130] {
            let got = condensed(n, |i, j| (i * 1000 + j) as f64);
            let mut want = Vec::new();
            for i in 0..n {
                for j in (i + 1)..n {
                    want.push((i * 1000 + j) as f64);
                }
            }
            assert_eq!(got, want, "n = {n}");
        }
    }

    #[test]
    fn kernels_match_plain_loops() {
        // Plain one-accumulator loops as the outside reference, on padded rows.
        let x = DMatrix::from_fn(3, 13, |i, j| ((i * 31 + j * 17) % 7) as f64 * 0.5);
        let rm = RowMajor::new(&x);
        assert_eq!(rm.row(0).len() % LANES, 0);
        let (a, b) = (rm.row(0), rm.row(2));
        let plain =
            |f: &dyn Fn(f64, f64) -> f64| (0..13).map(|j| f(x[(0, j)], x[(2, j)])).sum::<f64>();
        assert!((sum_min(a, b) - plain(&|u, v| u.min(v))).abs() < 1e-12);
        assert!((sum_abs_diff(a, b) - plain(&|u, v| (u - v).abs())).abs() < 1e-12);
        assert!((sum_sq_diff(a, b) - plain(&|u, v| (u - v) * (u - v))).abs() < 1e-12);
        assert!((dot(a, b) - plain(&|u, v| u * v)).abs() < 1e-12);
        let (pa, pb) = sum_excess(a, b);
        assert!((pa - plain(&|u, v| (u - v).max(0.0))).abs() < 1e-12);
        assert!((pb - plain(&|u, v| (v - u).max(0.0))).abs() < 1e-12);
        assert!((rm.row_sums()[1] - x.row(1).sum()).abs() < 1e-12);
    }
}
