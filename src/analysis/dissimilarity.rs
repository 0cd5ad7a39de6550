//! Dissimilarity matrices, stored once in condensed (upper-triangle) form.

use super::AnalysisError;

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
        let dm = DistanceMatrix { n, data };
        for i in 0..n {
            for j in (i + 1)..n {
                let v = dm.get(i, j);
                if !v.is_finite() {
                    return Err(AnalysisError::NonFinite { row: i, col: j });
                }
                if v < 0.0 {
                    return Err(AnalysisError::Negative { row: i, col: j });
                }
            }
        }
        Ok(dm)
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

#[cfg(test)]
mod tests {
    use super::*;

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
