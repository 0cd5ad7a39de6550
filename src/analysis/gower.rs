//! Gower centring: G = J A J with A = [-d²/2], computed in O(n²) from row,
//! column and grand means (Gower 1966, Biometrika 53:325-338).

use nalgebra::DMatrix;

use super::DistanceMatrix;

/// The Gower-centred matrix G of a dissimilarity matrix, dense n × n.
///
/// `g_ik = a_ik - ā_i. - ā_.k + ā_..` with `a_ik = -d_ik² / 2`. Its trace is the
/// total sum of squares `(1/n) Σ_{i<k} d_ik²` for any symmetric D with zero diagonal.
pub fn gower_centre(d: &DistanceMatrix) -> DMatrix<f64> {
    let n = d.n();
    let mut a = DMatrix::<f64>::zeros(n, n);
    for i in 0..n {
        for k in (i + 1)..n {
            let v = -0.5 * d.get(i, k).powi(2);
            a[(i, k)] = v;
            a[(k, i)] = v;
        }
    }
    if n == 0 {
        return a;
    }
    let nf = n as f64;
    let row_means: Vec<f64> = (0..n).map(|i| a.row(i).sum() / nf).collect();
    let grand = row_means.iter().sum::<f64>() / nf;
    for i in 0..n {
        for k in 0..n {
            // A is symmetric, so column means equal row means.
            a[(i, k)] += grand - row_means[i] - row_means[k];
        }
    }
    a
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn trace_equals_total_sum_of_squares() {
        // Huygens identity (METHODS.md §4.1): tr(G) = (1/n) Σ_{i<k} d_ik².
        let d = DistanceMatrix::from_fn(6, |i, j| ((i * 7 + j * 3) % 5) as f64 + 0.5).unwrap();
        let g = gower_centre(&d);
        let ss: f64 = d.condensed().iter().map(|v| v * v).sum::<f64>() / 6.0;
        assert!((g.trace() - ss).abs() < 1e-12);
        for i in 0..6 {
            assert!(g.row(i).sum().abs() < 1e-12);
        }
    }
}
