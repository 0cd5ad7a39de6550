//! Dissimilarity matrices, stored once in condensed (upper-triangle) form, and
//! the dissimilarity coefficients of docs/methods.md, "Dissimilarities" ([`Distance`]).
//!
//! Owns the pairwise kernels: data are copied once into a row-major contiguous
//! buffer padded with zeros to a multiple of the SIMD chunk, rows are processed in
//! cache-sized tiles in parallel (rayon), and every pair is computed by the same
//! sequential code, so the result does not depend on the number of threads.
//! Pure: no I/O.

use nalgebra::DMatrix;

use super::AnalysisError;
use super::pairwise::{self, RowMajor};
use super::transform::{
    self, Transform, check_counts, check_finite, chi_square_coordinates, refuse_empty_rows,
};

/// A symmetric n × n dissimilarity matrix with zero diagonal, stored condensed:
/// the entries above the diagonal, row by row (`(0,1), (0,2), …, (0,n-1), (1,2), …`),
/// the same order as SciPy's `pdist`.
#[derive(Debug, Clone, PartialEq)]
pub struct DistanceMatrix {
    n: usize,
    data: Vec<f64>,
}

impl DistanceMatrix {
    /// Build from condensed data of length n(n-1)/2.
    ///
    /// # Errors
    /// [`AnalysisError::DimensionMismatch`] when the length is wrong;
    /// [`AnalysisError::NonFinite`] / [`AnalysisError::Negative`] on bad entries.
    pub fn from_condensed(n: usize, data: Vec<f64>) -> Result<Self, AnalysisError> {
        let expected = n * n.saturating_sub(1) / 2;
        if data.len() != expected {
            return Err(AnalysisError::DimensionMismatch {
                expected,
                found: data.len(),
            });
        }
        // Linear scan; the (i, j) of a bad entry is recovered only on failure.
        if let Some(k) = data.iter().position(|v| !v.is_finite() || *v < 0.0) {
            let (i, j) = Self::pair_of(n, k);
            return Err(if data[k].is_finite() {
                AnalysisError::Negative { row: i, col: j }
            } else {
                AnalysisError::NonFinite { row: i, col: j }
            });
        }
        Ok(DistanceMatrix { n, data })
    }

    /// Build by evaluating `f(i, j)` for every pair i < j.
    ///
    /// # Errors
    /// As [`DistanceMatrix::from_condensed`].
    pub fn from_fn(
        n: usize,
        mut f: impl FnMut(usize, usize) -> f64,
    ) -> Result<Self, AnalysisError> {
        let mut data = Vec::with_capacity(n * n.saturating_sub(1) / 2);
        for i in 0..n {
            for j in (i + 1)..n {
                data.push(f(i, j));
            }
        }
        Self::from_condensed(n, data)
    }

    /// Number of samples.
    pub fn n(&self) -> usize {
        self.n
    }

    /// The condensed entries.
    pub fn condensed(&self) -> &[f64] {
        &self.data
    }

    /// Index into the condensed vector of pair (i, j), i < j.
    #[inline]
    pub fn index(n: usize, i: usize, j: usize) -> usize {
        debug_assert!(i < j && j < n);
        i * n - i * (i + 1) / 2 + (j - i - 1)
    }

    /// The pair (i, j), i < j, stored at condensed index `k` (inverse of [`DistanceMatrix::index`]).
    pub fn pair_of(n: usize, k: usize) -> (usize, usize) {
        let mut i = 0;
        let mut start = 0;
        while i + 1 < n && start + (n - i - 1) <= k {
            start += n - i - 1;
            i += 1;
        }
        (i, i + 1 + (k - start))
    }

    /// Dissimilarity between samples i and j (0 when i == j).
    #[inline]
    pub fn get(&self, i: usize, j: usize) -> f64 {
        match i.cmp(&j) {
            std::cmp::Ordering::Equal => 0.0,
            std::cmp::Ordering::Less => self.data[Self::index(self.n, i, j)],
            std::cmp::Ordering::Greater => self.data[Self::index(self.n, j, i)],
        }
    }

    /// The sub-matrix of the given samples, in the given order (for pairwise tests:
    /// dissimilarities are computed once on the full table and then subset).
    pub fn subset(&self, idx: &[usize]) -> DistanceMatrix {
        let m = idx.len();
        let mut data = Vec::with_capacity(m * m.saturating_sub(1) / 2);
        for a in 0..m {
            for b in (a + 1)..m {
                data.push(self.get(idx[a], idx[b]));
            }
        }
        DistanceMatrix { n: m, data }
    }

    /// The full square matrix, row by row.
    pub fn to_square(&self) -> Vec<Vec<f64>> {
        (0..self.n)
            .map(|i| (0..self.n).map(|j| self.get(i, j)).collect())
            .collect()
    }
}

/// A dissimilarity coefficient between samples (rows); definitions and sources in
/// docs/methods.md, "Dissimilarities".
///
/// Write `A = t_i`, `B = t_k` for the totals of the two samples (after any
/// transform) and `W = Σ_j min(y_ij, y_kj)`. What each does with *size* (the
/// sample total) and with all-zero samples is stated per variant.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
/// Serialised as its stable name ([`Distance::name`]), e.g. in stored run parameters.
#[serde(rename_all = "kebab-case")]
pub enum Distance {
    /// Bray & Curtis (1957, Ecol. Monogr. 27:325-349):
    /// `Σ|y_ij - y_kj| / Σ(y_ij + y_kj) = 1 - 2W/(A + B)`, range [0, 1].
    /// Size: unchanged when *both* samples are multiplied by one constant, but
    /// sensitive to their ratio (`d(c·y, y) = |c-1|/(c+1)`).
    /// Empty samples: one empty sample is at distance exactly 1 from every
    /// non-empty one; two or more empty samples make 0/0 and are refused
    /// ([`AnalysisError::EmptySamples`] listing them). Needs values ≥ 0.
    BrayCurtis,
    /// Euclidean distance `sqrt(Σ (x_ij - x_kj)²)` on the values given. Strongly
    /// size-driven on raw counts; double zeros count as similarity. Empty samples
    /// are ordinary points (the origin). Accepts any finite values.
    Euclidean,
    /// Chi-square distance of correspondence analysis,
    /// `sqrt(Σ_j (a_ij - a_kj)² / c_j)`, with profiles `a_ij = y_ij / t_i` and
    /// column masses `c_j = y_+j / y_++` **of the matrix analysed** (compute on
    /// the full table, then subset). Size: a pair depends only on the two
    /// profiles, but the masses depend on every row. Empty samples and empty taxa
    /// are refused ([`AnalysisError::EmptySamples`], [`AnalysisError::EmptyTaxa`]).
    /// Needs values ≥ 0.
    ChiSquare,
    /// Hellinger distance in the ecological form (Legendre & Gallagher 2001,
    /// Oecologia 129:271-280): Euclidean distance between rows `sqrt(a_ij)`,
    /// range [0, √2] (√2 when no taxon is shared; no `1/√2` factor). Shape only.
    /// Empty samples are refused ([`AnalysisError::EmptySamples`]). Needs values ≥ 0.
    Hellinger,
    /// Binary Jaccard `(b + c)/(a + b + c)`, with presence meaning value > 0:
    /// a = taxa in both, b, c = taxa in one only. Size is ignored entirely.
    /// Empty samples: two empty samples are at distance 0 (the SciPy ≥ 1.2
    /// convention), an empty and a non-empty sample at distance 1. Needs values ≥ 0.
    Jaccard,
    /// Quantitative Kulczynski `1 - (W/A + W/B)/2`. Size-sensitive. Empty samples
    /// are refused ([`AnalysisError::EmptySamples`]): `W/A` is undefined for A = 0.
    /// Needs values ≥ 0.
    Kulczynski,
    /// Manhattan (city-block) distance `Σ |x_ij - x_kj|`. Size-driven on raw
    /// counts. Empty samples are ordinary points. Accepts any finite values.
    Manhattan,
}

/// Below this value a Bray-Curtis or Kulczynski dissimilarity computed from the
/// shared part `W` (which cancels) is recomputed from the differences directly.
const SMALL_D: f64 = 1e-3;
/// A squared Euclidean distance from norms and dot product with
/// `d² ≤ GRAM_GUARD (‖x‖² + ‖y‖²)` is recomputed from the differences, which bounds
/// the relative error of the Gram route near 1e-12.
const GRAM_GUARD: f64 = 1e-3;

impl Distance {
    /// Every coefficient, in documentation order.
    pub const ALL: [Distance; 7] = [
        Distance::BrayCurtis,
        Distance::Euclidean,
        Distance::ChiSquare,
        Distance::Hellinger,
        Distance::Jaccard,
        Distance::Kulczynski,
        Distance::Manhattan,
    ];

    /// Stable lowercase name, used in output and stored runs.
    pub fn name(&self) -> &'static str {
        match self {
            Distance::BrayCurtis => "bray-curtis",
            Distance::Euclidean => "euclidean",
            Distance::ChiSquare => "chi-square",
            Distance::Hellinger => "hellinger",
            Distance::Jaccard => "jaccard",
            Distance::Kulczynski => "kulczynski",
            Distance::Manhattan => "manhattan",
        }
    }

    /// The coefficient with the given stable name, if any.
    pub fn from_name(name: &str) -> Option<Distance> {
        Self::ALL.into_iter().find(|d| d.name() == name)
    }

    /// True when `d(i, k)` depends on the two samples only through their
    /// proportions (or, for Jaccard, their presences): multiplying one sample by
    /// a positive constant leaves its distances unchanged. For chi-square this
    /// holds for fixed column masses; the masses themselves use every row.
    pub fn is_shape_only(&self) -> bool {
        // Exhaustive on purpose: a new coefficient must decide.
        match self {
            Distance::ChiSquare | Distance::Hellinger | Distance::Jaccard => true,
            Distance::BrayCurtis
            | Distance::Euclidean
            | Distance::Kulczynski
            | Distance::Manhattan => false,
        }
    }

    /// True when the coefficient needs non-negative input (all but Euclidean and Manhattan).
    pub fn needs_non_negative(&self) -> bool {
        match self {
            Distance::Euclidean | Distance::Manhattan => false,
            Distance::BrayCurtis
            | Distance::ChiSquare
            | Distance::Hellinger
            | Distance::Jaccard
            | Distance::Kulczynski => true,
        }
    }

    /// True when the distance is, by construction, the Euclidean distance between
    /// rows of some transformed matrix (see [`Distance::euclidean_coordinates`]), so
    /// its Gower-centred matrix is positive semidefinite (Gower & Legendre 1986,
    /// J. Classification 3:5-48; docs/methods.md, "Euclidean and non-Euclidean dissimilarities").
    pub fn is_euclidean(&self) -> bool {
        match self {
            Distance::Euclidean | Distance::ChiSquare | Distance::Hellinger => true,
            Distance::BrayCurtis
            | Distance::Jaccard
            | Distance::Kulczynski
            | Distance::Manhattan => false,
        }
    }

    /// For Euclidean-type distances, the coordinates whose Euclidean distances
    /// are this distance: `x` itself, the chi-square coordinates, or the
    /// Hellinger-transformed rows. `None` for the other coefficients.
    ///
    /// # Errors
    /// As [`Distance::compute`].
    pub fn euclidean_coordinates(
        &self,
        x: &DMatrix<f64>,
    ) -> Result<Option<DMatrix<f64>>, AnalysisError> {
        match self {
            Distance::Euclidean => {
                check_finite(x)?;
                Ok(Some(x.clone()))
            }
            Distance::ChiSquare => chi_square_coordinates(x).map(Some),
            Distance::Hellinger => Transform::Hellinger.apply(x).map(Some),
            _ => Ok(None),
        }
    }

    /// Apply `transform` to `y`, then compute this coefficient.
    ///
    /// # Errors
    /// As [`Transform::apply`] and [`Distance::compute`].
    pub fn compute_after(
        &self,
        transform: Transform,
        y: &DMatrix<f64>,
    ) -> Result<DistanceMatrix, AnalysisError> {
        self.compute(&transform.apply(y)?)
    }

    /// Dissimilarities between all rows of `x` (samples in rows), condensed.
    ///
    /// Parallel over tiles of rows; the result is identical on any number of threads.
    ///
    /// # Errors
    /// [`AnalysisError::NonFinite`] on NaN/inf input; [`AnalysisError::Negative`]
    /// on negative input where [`Distance::needs_non_negative`]; the empty-sample
    /// and empty-taxon errors stated on each variant.
    ///
    /// # Examples
    /// ```
    /// use nalgebra::DMatrix;
    /// use tally::analysis::Distance;
    /// // Legendre & Legendre (1998, p. 457) table; Bray-Curtis d(1,2) = 1 - 2·30/(40 + 35) = 0.2
    /// let y = DMatrix::from_row_slice(3, 3, &[10., 10., 20., 10., 15., 10., 15., 5., 5.]);
    /// let d = Distance::BrayCurtis.compute(&y).unwrap();
    /// assert!((d.get(0, 1) - 0.2).abs() < 1e-12);
    /// ```
    pub fn compute(&self, x: &DMatrix<f64>) -> Result<DistanceMatrix, AnalysisError> {
        if self.needs_non_negative() {
            check_counts(x)?;
        } else {
            check_finite(x)?;
        }
        let n = x.nrows();
        let data = match self {
            Distance::Euclidean => euclidean(x),
            Distance::ChiSquare => euclidean(&chi_square_coordinates(x)?),
            Distance::Hellinger => euclidean(&Transform::Hellinger.apply(x)?),
            Distance::Manhattan => {
                let rm = RowMajor::new(x);
                pairwise::condensed(n, |i, j| pairwise::sum_abs_diff(rm.row(i), rm.row(j)))
            }
            Distance::BrayCurtis => {
                let rm = RowMajor::new(x);
                let t = rm.row_sums();
                let empty: Vec<usize> = (0..n).filter(|&i| t[i] <= 0.0).collect();
                if empty.len() >= 2 {
                    return Err(AnalysisError::EmptySamples { rows: empty });
                }
                pairwise::condensed(n, |i, j| {
                    let (a, b) = (rm.row(i), rm.row(j));
                    let s = t[i] + t[j];
                    let d = (s - 2.0 * pairwise::sum_min(a, b)) / s;
                    if d < SMALL_D {
                        pairwise::sum_abs_diff(a, b) / s
                    } else {
                        d
                    }
                })
            }
            Distance::Kulczynski => {
                let rm = RowMajor::new(x);
                let t = rm.row_sums();
                refuse_empty_rows(&t)?;
                pairwise::condensed(n, |i, j| {
                    let (a, b) = (rm.row(i), rm.row(j));
                    let w = pairwise::sum_min(a, b);
                    let d = 1.0 - 0.5 * (w / t[i] + w / t[j]);
                    if d < SMALL_D {
                        let (pa, pb) = pairwise::sum_excess(a, b);
                        0.5 * (pa / t[i] + pb / t[j])
                    } else {
                        d
                    }
                })
            }
            Distance::Jaccard => {
                // Shared presences are dot products of 0/1 rows: small exact
                // integers, whatever the summation order, so no cancellation.
                let pres = Transform::Presence.apply(x)?;
                let t = transform::row_totals(&pres);
                gram_pairs(&pres, |i, j, shared| {
                    let union = t[i] + t[j] - shared;
                    if union > 0.0 {
                        (union - shared) / union
                    } else {
                        0.0
                    }
                })
            }
        };
        DistanceMatrix::from_condensed(n, data)
    }
}

/// Rows per block of the Gram route: a block's k × 256 product stays near 10 MB
/// for n = 5000.
const GRAM_BLOCK: usize = 256;

/// Euclidean distances through `‖x‖² + ‖y‖² - 2 x·y`, falling back to the
/// direct sum of squared differences where that form would cancel (see
/// [`GRAM_GUARD`]).
fn euclidean(x: &DMatrix<f64>) -> Vec<f64> {
    let rm = RowMajor::new(x);
    let norms = rm.row_sq_norms();
    gram_pairs(x, |i, j, dot| {
        let s = norms[i] + norms[j];
        let d2 = s - 2.0 * dot;
        if d2 <= GRAM_GUARD * s {
            pairwise::sum_sq_diff(rm.row(i), rm.row(j)).sqrt()
        } else {
            d2.sqrt()
        }
    })
}

/// Condensed `f(i, j, x_i·x_j)` for all i < j, the dot products taken block by
/// block as matrix products (nalgebra's blocked GEMM, which picks the CPU's
/// widest SIMD at run time). Every dot product depends only on the fixed block
/// layout, so the result does not depend on the number of threads.
fn gram_pairs<F>(x: &DMatrix<f64>, f: F) -> Vec<f64>
where
    F: Fn(usize, usize, f64) -> f64 + Sync,
{
    let n = x.nrows();
    let xt = x.transpose();
    pairwise::by_row_blocks(n, GRAM_BLOCK, |i0, segs| {
        let m = segs.len();
        let k = n - i0;
        // Column di of `dots` holds row (i0 + di) against rows i0..n.
        let mut dots = DMatrix::<f64>::zeros(k, m);
        dots.gemm(1.0, &x.rows(i0, k), &xt.columns(i0, m), 0.0);
        for (di, seg) in segs.iter_mut().enumerate() {
            let i = i0 + di;
            let col = dots.column(di);
            for j in (i + 1)..n {
                seg[j - i - 1] = f(i, j, col[j - i0]);
            }
        }
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    use approx::assert_relative_eq;

    use crate::analysis::prec::test_data::{ll457, toy};

    #[test]
    fn ll457_distances() {
        // Input: docs/methods.md, "Legendre & Legendre's 3 × 3 table". Distances for
        // pairs 1-2, 1-3, 2-3 derived from the formulas of
        // docs/methods.md, "Dissimilarities" (computed with NumPy, 6 decimals); the book
        // gives the input only.
        let y = ll457();
        let cases = [
            (Distance::ChiSquare, [0.491052, 0.784523, 0.690910]),
            (Distance::Hellinger, [0.234297, 0.381751, 0.329074]),
            (Distance::BrayCurtis, [0.200000, 0.384615, 0.333333]),
        ];
        for (dist, want) in cases {
            let d = dist.compute(&y).unwrap();
            for (got, want) in d.condensed().iter().zip(want) {
                assert_relative_eq!(*got, want, epsilon = 1e-6);
            }
        }
        // Chord distance: Euclidean distance on rows scaled to unit length
        // (Legendre & Gallagher 2001, Oecologia 129:271-280;
        // docs/methods.md, "Transformations"), values derived in the same way.
        let mut chord = y.clone();
        for mut r in chord.row_iter_mut() {
            let norm = r.norm();
            r /= norm;
        }
        let d = Distance::Euclidean.compute(&chord).unwrap();
        for (got, want) in d.condensed().iter().zip([0.466620, 0.723120, 0.625460]) {
            assert_relative_eq!(*got, want, epsilon = 1e-6);
        }
    }

    #[test]
    fn toy_community_distances() {
        // docs/methods.md, "The toy community": d(1,2) and d(1,6) (1-based sample
        // numbers) derived from docs/methods.md, "Dissimilarities" (computed with NumPy,
        // 9 decimals, no publication), plus BC d(6,10) = 1 - 2·13/40, by hand.
        let y = toy();
        let cases = [
            (Distance::BrayCurtis, 0.298245614, 0.708333333),
            (Distance::Jaccard, 0.5, 0.333333333),
            (Distance::Kulczynski, 0.246031746, 0.703703704),
            (Distance::Hellinger, 0.362444298, 0.912680723),
            (Distance::ChiSquare, 0.231814271, 1.484910443),
        ];
        for (dist, d12, d16) in cases {
            let d = dist.compute(&y).unwrap();
            assert_relative_eq!(d.get(0, 1), d12, epsilon = 1e-9);
            assert_relative_eq!(d.get(0, 5), d16, epsilon = 1e-9);
        }
        let bc = Distance::BrayCurtis.compute(&y).unwrap();
        assert_relative_eq!(bc.get(5, 9), 0.35, epsilon = 1e-12);
    }

    #[test]
    fn bray_curtis_pure_size_pair() {
        // Derived from the definition (docs/methods.md, "Which dissimilarities carry size"):
        // d_BC(c·y, y) = |c-1|/(c+1) = tanh(|ln c|/2).
        let y = DMatrix::from_row_slice(2, 4, &[3., 0., 7., 1., 6., 0., 14., 2.]);
        let d = Distance::BrayCurtis.compute(&y).unwrap();
        assert_relative_eq!(d.get(0, 1), 1.0 / 3.0, max_relative = 1e-14);
        assert_relative_eq!(d.get(0, 1), (2f64.ln() / 2.0).tanh(), max_relative = 1e-14);
    }

    #[test]
    fn empty_sample_conventions() {
        let y = DMatrix::from_row_slice(4, 3, &[1., 2., 0., 0., 0., 0., 3., 0., 1., 0., 0., 0.]);
        let one_empty = y.rows(0, 3).into_owned();
        // docs/methods.md, "Empty samples and empty taxa": BC is exactly 1 between an
        // empty and a non-empty sample, 0/0 between two empty samples (refused here).
        let bc = Distance::BrayCurtis.compute(&one_empty).unwrap();
        assert_eq!((bc.get(0, 1), bc.get(1, 2)), (1.0, 1.0));
        assert_eq!(
            Distance::BrayCurtis.compute(&y),
            Err(AnalysisError::EmptySamples { rows: vec![1, 3] })
        );
        // SciPy docs (scipy.spatial.distance.jaccard, since 1.2.0): two all-zero
        // vectors are at distance 0.
        let j = Distance::Jaccard.compute(&y).unwrap();
        assert_eq!((j.get(1, 3), j.get(0, 1)), (0.0, 1.0));
        for dist in [
            Distance::Kulczynski,
            Distance::Hellinger,
            Distance::ChiSquare,
        ] {
            assert_eq!(
                dist.compute(&y),
                Err(AnalysisError::EmptySamples { rows: vec![1, 3] }),
                "{}",
                dist.name()
            );
        }
        for dist in [Distance::Euclidean, Distance::Manhattan] {
            assert!(dist.compute(&y).is_ok());
        }
        let zero_col = DMatrix::from_row_slice(2, 2, &[1., 0., 2., 0.]);
        assert_eq!(
            Distance::ChiSquare.compute(&zero_col),
            Err(AnalysisError::EmptyTaxa { cols: vec![1] })
        );
        let neg = DMatrix::from_row_slice(2, 1, &[1., -1.]);
        assert_eq!(
            Distance::BrayCurtis.compute(&neg),
            Err(AnalysisError::Negative { row: 1, col: 0 })
        );
        assert_relative_eq!(Distance::Euclidean.compute(&neg).unwrap().get(0, 1), 2.0);
    }

    #[test]
    fn near_identical_samples_keep_relative_accuracy() {
        // The shared-part forms cancel for near-identical samples; the direct
        // difference fallback must give the exact small values.
        // With δ the stored difference (exact by Sterbenz' lemma), by definition
        // BC = δ/(4000+δ), Euclidean = δ, Kulczynski = δ/(2(2000+δ)).
        let y = DMatrix::from_row_slice(2, 2, &[1000., 1000., 1000., 1000. + 1e-6]);
        let delta = (1000.0 + 1e-6) - 1000.0;
        let bc = Distance::BrayCurtis.compute(&y).unwrap().get(0, 1);
        assert_relative_eq!(bc, delta / (4000.0 + delta), max_relative = 1e-12);
        let eu = Distance::Euclidean.compute(&y).unwrap().get(0, 1);
        assert_relative_eq!(eu, delta, max_relative = 1e-12);
        let ku = Distance::Kulczynski.compute(&y).unwrap().get(0, 1);
        assert_relative_eq!(ku, 0.5 * delta / (2000.0 + delta), max_relative = 1e-12);
    }

    #[test]
    fn names_round_trip() {
        for d in Distance::ALL {
            assert_eq!(Distance::from_name(d.name()), Some(d));
            assert_eq!(
                serde_json::to_value(d).unwrap(),
                serde_json::json!(d.name())
            );
        }
    }

    #[test]
    fn pair_of_inverts_index() {
        for n in [2usize, 3, 7] {
            for i in 0..n {
                for j in (i + 1)..n {
                    assert_eq!(
                        DistanceMatrix::pair_of(n, DistanceMatrix::index(n, i, j)),
                        (i, j)
                    );
                }
            }
        }
    }

    #[test]
    fn condensed_index_matches_pdist_order() {
        // common practice, no source: pdist order is (0,1),(0,2),...,(1,2),...
        let n = 5;
        let mut k = 0;
        for i in 0..n {
            for j in (i + 1)..n {
                assert_eq!(DistanceMatrix::index(n, i, j), k);
                k += 1;
            }
        }
    }
}
