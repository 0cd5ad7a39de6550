//! Transformations of a samples × taxa matrix applied before a dissimilarity
//! is computed (docs/methods.md, "Transformations"), and the chi-square
//! standardisation used by the chi-square distance and correspondence analysis.
//!
//! Owns input validation for non-negative data (finite, ≥ 0) and the refusal of
//! empty samples where a transform needs the sample total. Pure: no I/O.

use nalgebra::DMatrix;

use super::AnalysisError;

/// A transformation applied elementwise or row-wise to counts.
///
/// Which ones remove *size* (the sample total): only [`Transform::Profile`] and
/// [`Transform::Hellinger`] (each row then depends only on its own proportions).
/// [`Transform::Sqrt`], [`Transform::FourthRoot`] and [`Transform::Log1p`]
/// compress size but keep it; [`Transform::Presence`] keeps only which taxa occur.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
/// Serialised as its stable name ([`Transform::name`]), e.g. in stored run parameters.
#[serde(rename_all = "kebab-case")]
pub enum Transform {
    /// Leave the values as they are.
    None,
    /// Square root, `y^(1/2)`.
    Sqrt,
    /// Fourth root, `y^(1/4)`.
    FourthRoot,
    /// Natural logarithm of one plus the value, `ln(1 + y)`.
    Log1p,
    /// Presence/absence: 1 where `y > 0`, else 0 (no tolerance).
    Presence,
    /// Relative abundance (profile): `y_ij / t_i` with `t_i` the row total.
    Profile,
    /// Square root of the profile, `sqrt(y_ij / t_i)` (Legendre & Gallagher 2001,
    /// Oecologia 129:271-280).
    Hellinger,
}

impl Transform {
    /// Every transform, in documentation order.
    pub const ALL: [Transform; 7] = [
        Transform::None,
        Transform::Sqrt,
        Transform::FourthRoot,
        Transform::Log1p,
        Transform::Presence,
        Transform::Profile,
        Transform::Hellinger,
    ];

    /// Stable lowercase name, used in output and stored runs.
    pub fn name(&self) -> &'static str {
        match self {
            Transform::None => "none",
            Transform::Sqrt => "sqrt",
            Transform::FourthRoot => "fourth-root",
            Transform::Log1p => "log1p",
            Transform::Presence => "presence",
            Transform::Profile => "profile",
            Transform::Hellinger => "hellinger",
        }
    }

    /// The transform with the given stable name, if any.
    pub fn from_name(name: &str) -> Option<Transform> {
        Self::ALL.into_iter().find(|t| t.name() == name)
    }

    /// True when each transformed row depends only on that row's proportions,
    /// i.e. multiplying a sample by a positive constant leaves its row unchanged.
    pub fn removes_size(&self) -> bool {
        matches!(self, Transform::Profile | Transform::Hellinger)
    }

    /// Apply the transform to `y` (samples in rows).
    ///
    /// # Errors
    /// [`AnalysisError::NonFinite`] / [`AnalysisError::Negative`] at the first bad
    /// entry (row-major order); for [`Transform::Profile`] and
    /// [`Transform::Hellinger`], [`AnalysisError::EmptySamples`] listing every
    /// row whose total is zero (its proportions are undefined:
    /// docs/methods.md, "Empty samples and empty taxa").
    ///
    /// # Examples
    /// ```
    /// use nalgebra::DMatrix;
    /// use tally::analysis::Transform;
    /// let y = DMatrix::from_row_slice(1, 3, &[1., 3., 0.]);
    /// let h = Transform::Hellinger.apply(&y).unwrap();
    /// assert_eq!(h.as_slice(), &[0.5, 0.75f64.sqrt(), 0.0]);
    /// ```
    pub fn apply(&self, y: &DMatrix<f64>) -> Result<DMatrix<f64>, AnalysisError> {
        check_counts(y)?;
        let out = match self {
            Transform::None => y.clone(),
            Transform::Sqrt => y.map(f64::sqrt),
            Transform::FourthRoot => y.map(|v| v.sqrt().sqrt()),
            Transform::Log1p => y.map(f64::ln_1p),
            Transform::Presence => y.map(|v| if v > 0.0 { 1.0 } else { 0.0 }),
            Transform::Profile | Transform::Hellinger => {
                let totals = row_totals(y);
                refuse_empty_rows(&totals)?;
                let mut out = y.clone();
                for (i, t) in totals.iter().enumerate() {
                    let mut row = out.row_mut(i);
                    row /= *t;
                    if *self == Transform::Hellinger {
                        row.apply(|v| *v = v.sqrt());
                    }
                }
                out
            }
        };
        Ok(out)
    }
}

/// The chi-square standardisation `a_ij / sqrt(c_j)`, with `a_ij = y_ij / t_i`
/// the row profile and `c_j = y_+j / y_++` the column mass **of the matrix
/// given** (docs/methods.md, "Transformations"). Euclidean distance between its
/// rows is the chi-square distance of correspondence analysis (Greenacre 2007,
/// *Correspondence Analysis in Practice*, 2nd ed. [from memory]).
///
/// The masses depend on every row: compute once on the full table and subset
/// the resulting distances, never recompute on a subset (same section).
///
/// # Errors
/// [`AnalysisError::NonFinite`] / [`AnalysisError::Negative`] on bad entries;
/// [`AnalysisError::EmptySamples`] listing all-zero rows;
/// [`AnalysisError::EmptyTaxa`] listing all-zero columns (they have no mass).
pub fn chi_square_coordinates(y: &DMatrix<f64>) -> Result<DMatrix<f64>, AnalysisError> {
    check_counts(y)?;
    let totals = row_totals(y);
    refuse_empty_rows(&totals)?;
    let col_totals: Vec<f64> = y.column_iter().map(|c| c.sum()).collect();
    let empty: Vec<usize> = (0..col_totals.len())
        .filter(|&j| col_totals[j] <= 0.0)
        .collect();
    if !empty.is_empty() {
        return Err(AnalysisError::EmptyTaxa { cols: empty });
    }
    let grand: f64 = col_totals.iter().sum();
    let inv_sqrt_mass: Vec<f64> = col_totals.iter().map(|c| (grand / c).sqrt()).collect();
    let mut out = y.clone();
    for j in 0..y.ncols() {
        for i in 0..y.nrows() {
            out[(i, j)] = y[(i, j)] / totals[i] * inv_sqrt_mass[j];
        }
    }
    Ok(out)
}

/// Check that every entry is finite and non-negative.
///
/// # Errors
/// [`AnalysisError::NonFinite`] or [`AnalysisError::Negative`] at the first bad
/// entry in row-major order.
pub fn check_counts(y: &DMatrix<f64>) -> Result<(), AnalysisError> {
    check_finite(y)?;
    for i in 0..y.nrows() {
        for j in 0..y.ncols() {
            if y[(i, j)] < 0.0 {
                return Err(AnalysisError::Negative { row: i, col: j });
            }
        }
    }
    Ok(())
}

/// Check that every entry is finite.
///
/// # Errors
/// [`AnalysisError::NonFinite`] at the first bad entry in row-major order.
pub fn check_finite(y: &DMatrix<f64>) -> Result<(), AnalysisError> {
    for i in 0..y.nrows() {
        for j in 0..y.ncols() {
            if !y[(i, j)].is_finite() {
                return Err(AnalysisError::NonFinite { row: i, col: j });
            }
        }
    }
    Ok(())
}

pub(crate) fn row_totals(y: &DMatrix<f64>) -> Vec<f64> {
    y.row_iter().map(|r| r.sum()).collect()
}

pub(crate) fn refuse_empty_rows(totals: &[f64]) -> Result<(), AnalysisError> {
    let empty: Vec<usize> = (0..totals.len()).filter(|&i| totals[i] <= 0.0).collect();
    if empty.is_empty() {
        Ok(())
    } else {
        Err(AnalysisError::EmptySamples { rows: empty })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    use crate::analysis::prec::test_data::ll457;

    #[test]
    #[allow(clippy::approx_constant)] // 0.707107 is the printed reference value, not 1/√2 by intent
    fn hellinger_and_chi_square_coordinates_of_ll457() {
        // Input: docs/methods.md, "Legendre & Legendre's 3 × 3 table". Expected values
        // derived from the formulas of docs/methods.md, "Transformations" (computed
        // with NumPy, printed to 6 decimals); the book gives the input only.
        let h = Transform::Hellinger.apply(&ll457()).unwrap();
        let expect_h = [
            [0.5, 0.5, 0.707107],
            [0.534522, 0.654654, 0.534522],
            [0.774597, 0.447214, 0.447214],
        ];
        let c = chi_square_coordinates(&ll457()).unwrap();
        let expect_c = [
            [0.422577, 0.456435, 0.845154],
            [0.482945, 0.782461, 0.482945],
            [1.014185, 0.365148, 0.338062],
        ];
        for i in 0..3 {
            for j in 0..3 {
                assert_relative_eq!(h[(i, j)], expect_h[i][j], epsilon = 1e-6);
                assert_relative_eq!(c[(i, j)], expect_c[i][j], epsilon = 1e-6);
            }
        }
    }

    #[test]
    fn elementwise_transforms() {
        // Definitions of docs/methods.md, "Transformations" evaluated on values with
        // exact results.
        let y = DMatrix::from_row_slice(1, 4, &[0., 1., 16., 81.]);
        assert_eq!(
            Transform::Sqrt.apply(&y).unwrap().as_slice(),
            &[0., 1., 4., 9.]
        );
        assert_eq!(
            Transform::FourthRoot.apply(&y).unwrap().as_slice(),
            &[0., 1., 2., 3.]
        );
        assert_eq!(
            Transform::Presence.apply(&y).unwrap().as_slice(),
            &[0., 1., 1., 1.]
        );
        let l = Transform::Log1p.apply(&y).unwrap();
        assert_relative_eq!(l[(0, 1)], std::f64::consts::LN_2, max_relative = 1e-15);
        let p = Transform::Profile.apply(&y).unwrap();
        assert_relative_eq!(p.sum(), 1.0, max_relative = 1e-15);
        assert_relative_eq!(p[(0, 2)], 16.0 / 98.0, max_relative = 1e-15);
    }

    #[test]
    fn refusals() {
        let y = DMatrix::from_row_slice(3, 2, &[1., 2., 0., 0., 0., 0.]);
        for t in [Transform::Profile, Transform::Hellinger] {
            assert_eq!(
                t.apply(&y),
                Err(AnalysisError::EmptySamples { rows: vec![1, 2] })
            );
        }
        assert!(Transform::Sqrt.apply(&y).is_ok());
        let neg = DMatrix::from_row_slice(1, 2, &[1., -2.]);
        assert_eq!(
            Transform::None.apply(&neg),
            Err(AnalysisError::Negative { row: 0, col: 1 })
        );
        let nan = DMatrix::from_row_slice(2, 1, &[1., f64::NAN]);
        assert_eq!(
            Transform::Sqrt.apply(&nan),
            Err(AnalysisError::NonFinite { row: 1, col: 0 })
        );
        let zcol = DMatrix::from_row_slice(2, 2, &[1., 0., 2., 0.]);
        assert_eq!(
            chi_square_coordinates(&zcol),
            Err(AnalysisError::EmptyTaxa { cols: vec![1] })
        );
        assert_eq!(
            chi_square_coordinates(&y),
            Err(AnalysisError::EmptySamples { rows: vec![1, 2] })
        );
    }

    #[test]
    fn names_round_trip() {
        for t in Transform::ALL {
            assert_eq!(Transform::from_name(t.name()), Some(t));
        }
        assert_eq!(
            Transform::from_name("fourth-root"),
            Some(Transform::FourthRoot)
        );
    }
}
