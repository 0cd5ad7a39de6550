//! Gower centring: G = J A J with A = [-d²/2], computed in O(n²) from row,
//! column and grand means (Gower 1966, Biometrika 53:325-338), and principal
//! coordinates analysis (PCoA) of G with its negative eigenvalues reported, plus
//! the opt-in Lingoes and Cailliez corrections
//! (docs/methods.md, "Gower centring and principal coordinates"). Pure: no I/O.

use nalgebra::{DMatrix, DVector, SymmetricEigen, linalg::Schur};

use super::{AnalysisError, DistanceMatrix, prec};

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

/// Correction for negative eigenvalues applied before a PCoA
/// (docs/methods.md, "Gower centring and principal coordinates").
///
/// Tests (PERMANOVA, db-RDA) never use a correction (McArdle & Anderson 2001,
/// Ecology 82:290-297); corrections are for real coordinates only.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Correction {
    /// Decompose G as it is.
    None,
    /// Lingoes (1971): `d~ = sqrt(d² + 2 c1)` off the diagonal, `c1 = |λ_min(G)|`.
    Lingoes,
    /// Cailliez (1983): `d~ = d + c2` off the diagonal, `c2` the largest real
    /// eigenvalue of `[[0, 2G], [-I, -4 G½]]`, `G½` the centred `[-d/2]`.
    Cailliez,
}

impl Correction {
    /// Stable lowercase name.
    pub fn name(&self) -> &'static str {
        match self {
            Correction::None => "none",
            Correction::Lingoes => "lingoes",
            Correction::Cailliez => "cailliez",
        }
    }
}

/// Result of a principal coordinates analysis.
#[derive(Debug, Clone, PartialEq)]
pub struct Pcoa {
    /// All n eigenvalues of G (of the corrected matrix when a correction was
    /// applied), descending; those with `|λ| <= prec::EIG_ZERO · max|λ|` are set to 0.
    pub eigenvalues: Vec<f64>,
    /// Principal coordinates on the positive axes, `Q₊ Λ₊^½`, n × k with k the
    /// number of positive eigenvalues, in eigenvalue order. Each axis' sign is
    /// fixed so that its largest-|entry| is positive.
    pub coordinates: DMatrix<f64>,
    /// "Imaginary" coordinates `Q₋ |Λ₋|^½` on the negative axes, n × m, most
    /// negative last (same order as `eigenvalues`); same sign rule.
    /// `d² = ‖x₊ᵢ - x₊ₖ‖² - ‖x₋ᵢ - x₋ₖ‖²` (Gower 1985, Linear Algebra Appl. 67:81-97).
    pub negative_coordinates: DMatrix<f64>,
    /// tr(G) = Σλ = total sum of squares `(1/n) Σ_{i<k} d²` of the matrix decomposed.
    pub trace: f64,
    /// Sum of the positive eigenvalues.
    pub positive_sum: f64,
    /// Sum of the absolute values of the negative eigenvalues.
    pub negative_sum: f64,
    /// `negative_sum / (positive_sum + negative_sum)`: 0 for a Euclidean matrix.
    pub negative_inertia_share: f64,
    /// The correction applied.
    pub correction: Correction,
    /// The constant it added (c1 for Lingoes, c2 for Cailliez, 0 for none).
    pub constant: f64,
}

/// PCoA of `d` without correction: eigen-decomposition of the Gower-centred
/// matrix, all eigenvalues reported (Gower 1966, Biometrika 53:325-338).
///
/// # Errors
/// [`AnalysisError::TooFewSamples`] when n < 2; [`AnalysisError::Numerical`]
/// when the eigensolver does not converge.
///
/// # Examples
/// ```
/// use tally::analysis::{DistanceMatrix, pcoa};
/// // Three points on a line at 0, 3, 4: one positive axis.
/// let d = DistanceMatrix::from_condensed(3, vec![3.0, 4.0, 1.0]).unwrap();
/// let p = pcoa(&d).unwrap();
/// assert_eq!(p.coordinates.ncols(), 1);
/// assert!((p.eigenvalues[0] - p.trace).abs() < 1e-12);
/// ```
pub fn pcoa(d: &DistanceMatrix) -> Result<Pcoa, AnalysisError> {
    pcoa_corrected(d, Correction::None)
}

/// PCoA after the given correction for negative eigenvalues
/// (docs/methods.md, "Gower centring and principal coordinates").
///
/// # Errors
/// As [`pcoa`].
pub fn pcoa_corrected(d: &DistanceMatrix, correction: Correction) -> Result<Pcoa, AnalysisError> {
    let n = d.n();
    if n < 2 {
        return Err(AnalysisError::TooFewSamples { found: n, min: 2 });
    }
    let (d, constant) = match correction {
        Correction::None => (d.clone(), 0.0),
        Correction::Lingoes => {
            let c1 = lingoes_constant(d)?;
            let data = d
                .condensed()
                .iter()
                .map(|v| (v * v + 2.0 * c1).sqrt())
                .collect();
            (DistanceMatrix::from_condensed(n, data)?, c1)
        }
        Correction::Cailliez => {
            let c2 = cailliez_constant(d)?;
            let data = d.condensed().iter().map(|v| v + c2).collect();
            (DistanceMatrix::from_condensed(n, data)?, c2)
        }
    };
    let (values, vectors) = sorted_eigen(gower_centre(&d))?;
    let positive: Vec<usize> = (0..n).filter(|&k| values[k] > 0.0).collect();
    let negative: Vec<usize> = (0..n).filter(|&k| values[k] < 0.0).collect();
    let axes = |idx: &[usize]| {
        DMatrix::from_fn(n, idx.len(), |i, a| {
            vectors[(i, idx[a])] * values[idx[a]].abs().sqrt()
        })
    };
    let positive_sum: f64 = positive.iter().map(|&k| values[k]).sum();
    let negative_sum: f64 = negative.iter().map(|&k| -values[k]).sum();
    let total = positive_sum + negative_sum;
    Ok(Pcoa {
        coordinates: axes(&positive),
        negative_coordinates: axes(&negative),
        trace: d.condensed().iter().map(|v| v * v).sum::<f64>() / n as f64,
        positive_sum,
        negative_sum,
        negative_inertia_share: if total > 0.0 {
            negative_sum / total
        } else {
            0.0
        },
        eigenvalues: values,
        correction,
        constant,
    })
}

/// Lingoes constant `c1 = |λ_min(G)|` (0 when G has no negative eigenvalue).
///
/// # Errors
/// As [`pcoa`].
pub fn lingoes_constant(d: &DistanceMatrix) -> Result<f64, AnalysisError> {
    if d.n() < 2 {
        return Err(AnalysisError::TooFewSamples {
            found: d.n(),
            min: 2,
        });
    }
    let (values, _) = sorted_eigen(gower_centre(d))?;
    Ok(values.last().map_or(0.0, |v| (-v).max(0.0)))
}

/// Cailliez constant `c2`: the largest real eigenvalue of the 2n × 2n matrix
/// `[[0, 2G], [-I, -4 G½]]`, with `G½` the Gower-centred matrix of `[-d/2]`
/// (Cailliez 1983, Psychometrika 48:305-310 [from memory], in the form given by
/// Legendre & Legendre, *Numerical Ecology* [from memory];
/// docs/methods.md, "Gower centring and principal coordinates").
/// Adding c2 to every off-diagonal d makes G positive semidefinite.
///
/// # Errors
/// As [`pcoa`].
pub fn cailliez_constant(d: &DistanceMatrix) -> Result<f64, AnalysisError> {
    let n = d.n();
    if n < 2 {
        return Err(AnalysisError::TooFewSamples { found: n, min: 2 });
    }
    let g = gower_centre(d);
    // Centring [-d/2] is centring [-(sqrt d)²/2].
    let root = DistanceMatrix::from_condensed(n, d.condensed().iter().map(|v| v.sqrt()).collect())?;
    let g_half = gower_centre(&root);
    let mut m = DMatrix::<f64>::zeros(2 * n, 2 * n);
    m.view_mut((0, n), (n, n)).copy_from(&(g * 2.0));
    m.view_mut((n, 0), (n, n)).fill_with_identity();
    m.view_mut((n, 0), (n, n)).neg_mut();
    m.view_mut((n, n), (n, n)).copy_from(&(g_half * -4.0));
    let scale = m.amax().max(f64::MIN_POSITIVE);
    let schur = Schur::try_new(m, f64::EPSILON, 1000 * n)
        .ok_or_else(|| AnalysisError::Numerical("Cailliez eigenvalues did not converge".into()))?;
    let ev = schur.complex_eigenvalues();
    ev.iter()
        .filter(|z| z.im.abs() <= 1e-8 * scale)
        .map(|z| z.re)
        .fold(None, |m: Option<f64>, v| Some(m.map_or(v, |m| m.max(v))))
        .map(|c| c.max(0.0))
        .ok_or_else(|| {
            AnalysisError::Numerical("no real eigenvalue for the Cailliez constant".into())
        })
}

/// Eigenvalues (descending, tiny ones zeroed) and matching eigenvectors of a
/// symmetric matrix, each vector's largest-|entry| made positive.
fn sorted_eigen(g: DMatrix<f64>) -> Result<(Vec<f64>, DMatrix<f64>), AnalysisError> {
    let n = g.nrows();
    let eig = SymmetricEigen::try_new(g, f64::EPSILON, 1000 * n.max(10)).ok_or_else(|| {
        AnalysisError::Numerical("symmetric eigen-decomposition did not converge".into())
    })?;
    let mut order: Vec<usize> = (0..n).collect();
    order.sort_by(|&a, &b| eig.eigenvalues[b].total_cmp(&eig.eigenvalues[a]));
    let max_abs = eig.eigenvalues.amax();
    let values: Vec<f64> = order
        .iter()
        .map(|&k| {
            let v = eig.eigenvalues[k];
            if v.abs() <= prec::EIG_ZERO * max_abs {
                0.0
            } else {
                v
            }
        })
        .collect();
    let mut vectors = DMatrix::<f64>::zeros(n, n);
    for (a, &k) in order.iter().enumerate() {
        let mut v: DVector<f64> = eig.eigenvectors.column(k).into_owned();
        // iamax returns the first index of the largest |entry|: deterministic.
        let imax = v.iamax();
        if v[imax] < 0.0 {
            v.neg_mut();
        }
        vectors.set_column(a, &v);
    }
    Ok((values, vectors))
}

/// Serialised as its stable name (e.g. in stored run parameters).
impl serde::Serialize for Correction {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_str(self.name())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    use crate::analysis::Distance;
    use crate::analysis::prec::test_data::toy;
    use approx::assert_relative_eq;

    #[test]
    fn pcoa_of_toy_bray_curtis() {
        // docs/methods.md, "The toy community", PCoA of Bray-Curtis: values computed with
        // NumPy (eigh of the Gower-centred matrix; no publication), 6 decimals for the
        // eigenvalues, 10 for the trace.
        let d = Distance::BrayCurtis.compute(&toy()).unwrap();
        let p = pcoa(&d).unwrap();
        let want = [
            1.082278, 0.186472, 0.137983, 0.084592, 0.039382, 0.004632, 0.000146, 0.0, -0.001831,
            -0.012382,
        ];
        assert_eq!(p.eigenvalues.len(), 10);
        for (got, want) in p.eigenvalues.iter().zip(want) {
            assert_relative_eq!(*got, want, epsilon = 1e-6);
        }
        assert_relative_eq!(p.trace, 1.5212708379, epsilon = 1e-10);
        assert_relative_eq!(p.eigenvalues.iter().sum::<f64>(), p.trace, epsilon = 1e-12);
        assert_eq!(p.coordinates.ncols(), 7);
        assert_eq!(p.negative_coordinates.ncols(), 2);
        assert_relative_eq!(p.negative_sum, 0.001831 + 0.012382, epsilon = 2e-6);
        assert!(p.negative_inertia_share > 0.0 && p.negative_inertia_share < 0.02);
        // Gower (1985): d² = ‖x₊ᵢ - x₊ₖ‖² - ‖x₋ᵢ - x₋ₖ‖².
        for i in 0..10 {
            for k in (i + 1)..10 {
                let pos = (p.coordinates.row(i) - p.coordinates.row(k)).norm_squared();
                let neg =
                    (p.negative_coordinates.row(i) - p.negative_coordinates.row(k)).norm_squared();
                assert_relative_eq!(pos - neg, d.get(i, k).powi(2), epsilon = 1e-12);
            }
        }
    }

    #[test]
    fn corrections_on_toy_bray_curtis() {
        // docs/methods.md, "The toy community": Lingoes c1 = 0.0123824893, Cailliez
        // c2 = 0.0803204785, computed with NumPy from the formulas of
        // docs/methods.md, "Gower centring and principal coordinates" (no publication).
        // By construction (same section), after either correction the min eigenvalue is
        // about 0 and one further zero eigenvalue appears beyond the trivial one.
        let d = Distance::BrayCurtis.compute(&toy()).unwrap();
        assert_relative_eq!(lingoes_constant(&d).unwrap(), 0.0123824893, epsilon = 1e-10);
        assert_relative_eq!(
            cailliez_constant(&d).unwrap(),
            0.0803204785,
            epsilon = 1e-10
        );
        for c in [Correction::Lingoes, Correction::Cailliez] {
            let p = pcoa_corrected(&d, c).unwrap();
            assert_eq!(p.correction, c);
            let max = p.eigenvalues[0];
            assert!(
                p.eigenvalues.iter().all(|v| *v >= -1e-12 * max),
                "{:?}",
                p.eigenvalues
            );
            let zeros = p
                .eigenvalues
                .iter()
                .filter(|v| v.abs() <= 1e-9 * max)
                .count();
            assert!(zeros >= 2, "{c:?}: {:?}", p.eigenvalues);
            assert_eq!(p.negative_sum, 0.0);
        }
    }

    #[test]
    fn euclidean_pcoa_signs_and_sizes() {
        // Classical scaling (Gower 1966): Euclidean distances of points in the plane
        // give exactly two positive axes reproducing them.
        let x = DMatrix::from_row_slice(5, 2, &[0., 0., 3., 0., 0., 4., 1., 1., -2., 5.]);
        let d = Distance::Euclidean.compute(&x).unwrap();
        let p = pcoa(&d).unwrap();
        assert_eq!(p.coordinates.ncols(), 2);
        assert_eq!(p.negative_inertia_share, 0.0);
        for a in 0..2 {
            let col = p.coordinates.column(a);
            assert!(col[col.iamax()] > 0.0);
        }
        assert_eq!(
            pcoa(&DistanceMatrix::from_condensed(1, vec![]).unwrap()),
            Err(AnalysisError::TooFewSamples { found: 1, min: 2 })
        );
    }

    #[test]
    fn trace_equals_total_sum_of_squares() {
        // Huygens identity (docs/methods.md, "Gower centring and principal coordinates"):
        // tr(G) = (1/n) Σ_{i<k} d_ik².
        let d = DistanceMatrix::from_fn(6, |i, j| ((i * 7 + j * 3) % 5) as f64 + 0.5).unwrap();
        let g = gower_centre(&d);
        let ss: f64 = d.condensed().iter().map(|v| v * v).sum::<f64>() / 6.0;
        assert!((g.trace() - ss).abs() < 1e-12);
        for i in 0..6 {
            assert!(g.row(i).sum().abs() < 1e-12);
        }
    }
}
