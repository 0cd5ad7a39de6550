//! Rarefying: subsampling every sample, without replacement, to the same number
//! of individuals, so that composition is compared at equal sampling depth
//! (fewer individuals counted means rare taxa are missed more often).
//!
//! Owns: [`rarefy`] (one seeded draw), [`mean_rarefied_distance`] (a
//! dissimilarity averaged over several draws) and [`min_total`].
//!
//! A draw takes each sample's individuals one by one, taxon by taxon, and keeps
//! each with probability `still needed / still available` (selection sampling,
//! Knuth, *The Art of Computer Programming* vol. 2, section 3.4.2, Algorithm S
//! [value from memory]), which gives every subset of N individuals the same
//! probability. The count of taxon j in the subsample is then hypergeometric
//! with mean `N · y_j / t` (tested below). Draw `r` of seed `s` uses generator
//! stream `r` of [`block_rng`]`(s, r)`, rows in order, so a draw does not depend
//! on how many other draws are made.

use nalgebra::DMatrix;

use super::permutation::{block_rng, bounded};
use super::{AnalysisError, Distance, DistanceMatrix, Transform};

/// Check that every value is a finite whole number ≥ 0 and return the row totals.
fn whole_totals(y: &DMatrix<f64>) -> Result<Vec<u64>, AnalysisError> {
    for i in 0..y.nrows() {
        for j in 0..y.ncols() {
            let v = y[(i, j)];
            if !v.is_finite() {
                return Err(AnalysisError::NonFinite { row: i, col: j });
            }
            if v < 0.0 {
                return Err(AnalysisError::Negative { row: i, col: j });
            }
            if v.fract() != 0.0 || v > 9.0e15 {
                return Err(AnalysisError::InvalidArgument {
                    name: "counts",
                    reason: format!(
                        "rarefying needs whole counts of individuals; row {i}, column {j} holds {v} \
                         (counts per unit effort cannot be subsampled: rarefy the raw counts)"
                    ),
                });
            }
        }
    }
    Ok((0..y.nrows())
        .map(|i| y.row(i).iter().map(|v| *v as u64).sum())
        .collect())
}

/// The smallest sample total (the usual depth for `--rarefy min`).
///
/// # Errors
/// As [`rarefy`] for values that are not whole counts; [`AnalysisError::TooFewSamples`]
/// for a matrix without rows.
pub fn min_total(y: &DMatrix<f64>) -> Result<u64, AnalysisError> {
    let t = whole_totals(y)?;
    t.into_iter()
        .min()
        .ok_or(AnalysisError::TooFewSamples { found: 0, min: 1 })
}

/// One seeded draw: every row of `y` subsampled without replacement to `depth`
/// individuals.
///
/// # Errors
/// [`AnalysisError::NonFinite`], [`AnalysisError::Negative`], and
/// [`AnalysisError::InvalidArgument`] for values that are not whole counts, for
/// `depth` 0, or for a row with fewer than `depth` individuals (drop such rows first).
pub fn rarefy(
    y: &DMatrix<f64>,
    depth: u64,
    seed: u64,
    draw: u64,
) -> Result<DMatrix<f64>, AnalysisError> {
    let totals = whole_totals(y)?;
    if depth == 0 {
        return Err(AnalysisError::InvalidArgument {
            name: "depth",
            reason: "rarefying to 0 individuals leaves nothing to compare".into(),
        });
    }
    if let Some(i) = totals.iter().position(|&t| t < depth) {
        return Err(AnalysisError::InvalidArgument {
            name: "depth",
            reason: format!("row {i} has {} individuals, fewer than {depth}", totals[i]),
        });
    }
    let mut rng = block_rng(seed, draw);
    let mut out = DMatrix::zeros(y.nrows(), y.ncols());
    for i in 0..y.nrows() {
        let mut available = totals[i];
        let mut needed = depth;
        for j in 0..y.ncols() {
            let c = y[(i, j)] as u64;
            let mut kept = 0u64;
            for _ in 0..c {
                if needed == 0 {
                    break;
                }
                if bounded(&mut rng, available) < needed {
                    kept += 1;
                    needed -= 1;
                }
                available -= 1;
            }
            out[(i, j)] = kept as f64;
            if needed == 0 {
                break;
            }
        }
    }
    Ok(out)
}

/// The dissimilarity `distance` after `transform`, averaged element by element over
/// `reps` rarefied draws (draws 0..reps of `seed`).
///
/// # Errors
/// As [`rarefy`] and [`Distance::compute_after`]; [`AnalysisError::InvalidArgument`]
/// for `reps` 0.
pub fn mean_rarefied_distance(
    y: &DMatrix<f64>,
    depth: u64,
    reps: usize,
    seed: u64,
    distance: Distance,
    transform: Transform,
) -> Result<DistanceMatrix, AnalysisError> {
    if reps == 0 {
        return Err(AnalysisError::InvalidArgument {
            name: "reps",
            reason: "at least one rarefied draw is needed".into(),
        });
    }
    let n = y.nrows();
    let mut sum = vec![0.0; n * n.saturating_sub(1) / 2];
    for r in 0..reps {
        let d = distance.compute_after(transform, &rarefy(y, depth, seed, r as u64)?)?;
        for (s, v) in sum.iter_mut().zip(d.condensed()) {
            *s += v;
        }
    }
    for s in &mut sum {
        *s /= reps as f64;
    }
    DistanceMatrix::from_condensed(n, sum)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn toy() -> DMatrix<f64> {
        DMatrix::from_row_slice(
            3,
            4,
            &[30., 10., 5., 5., 7., 0., 2., 1., 100., 60., 30., 10.],
        )
    }

    #[test]
    fn each_draw_has_the_depth_and_never_exceeds_the_counts() {
        let y = toy();
        for draw in 0..20 {
            let r = rarefy(&y, 10, 3, draw).unwrap();
            for i in 0..3 {
                assert_eq!(r.row(i).sum(), 10.0);
                for j in 0..4 {
                    assert!(r[(i, j)] <= y[(i, j)]);
                    assert_eq!(r[(i, j)].fract(), 0.0);
                }
            }
        }
        // Row 1 has exactly 10 individuals: subsampling to 10 keeps them all.
        assert_eq!(rarefy(&y, 10, 3, 0).unwrap().row(1), y.row(1));
        // Seeded: same seed and draw, same subsample; another draw differs somewhere.
        assert_eq!(rarefy(&y, 10, 3, 4).unwrap(), rarefy(&y, 10, 3, 4).unwrap());
        assert!((0..20).any(|d| rarefy(&y, 10, 3, d).unwrap() != rarefy(&y, 10, 3, 0).unwrap()));
    }

    #[test]
    fn mean_count_is_the_hypergeometric_mean() {
        // Subsampling k of N individuals without replacement, K of them of taxon j:
        // the count is hypergeometric with mean k K / N and variance
        // k (K/N) (1 - K/N) (N - k)/(N - 1) (Feller 1968, An Introduction to Probability
        // Theory vol. 1, section II.6 [value from memory]; the formulas are also those of
        // scipy.stats.hypergeom). Over R draws the mean of the counts has sd
        // sqrt(var / R); a deviation above 4.5 sd has probability < 1e-5 per cell.
        let y = DMatrix::from_row_slice(2, 4, &[50., 30., 15., 5., 3., 90., 6., 1.]);
        let k = 20.0;
        let reps = 4000;
        let mut sum = DMatrix::<f64>::zeros(2, 4);
        for r in 0..reps {
            sum += rarefy(&y, 20, 11, r).unwrap();
        }
        for i in 0..2 {
            let n = y.row(i).sum();
            for j in 0..4 {
                let kk = y[(i, j)];
                let mean = k * kk / n;
                let var = k * (kk / n) * (1.0 - kk / n) * (n - k) / (n - 1.0);
                let sd = (var / reps as f64).sqrt();
                let got = sum[(i, j)] / reps as f64;
                assert!(
                    (got - mean).abs() <= 4.5 * sd,
                    "cell ({i},{j}): {got} vs {mean} (sd {sd})"
                );
            }
        }
    }

    #[test]
    fn refuses_fractions_and_shallow_rows() {
        let y = DMatrix::from_row_slice(2, 2, &[1.5, 2.0, 3.0, 4.0]);
        assert!(matches!(
            rarefy(&y, 2, 1, 0),
            Err(AnalysisError::InvalidArgument { name: "counts", .. })
        ));
        let y = toy();
        assert!(matches!(
            rarefy(&y, 11, 1, 0),
            Err(AnalysisError::InvalidArgument { name: "depth", .. })
        ));
        assert_eq!(min_total(&y).unwrap(), 10);
    }

    #[test]
    fn averaged_distance_is_the_mean_of_the_draws() {
        let y = toy();
        let m = mean_rarefied_distance(&y, 10, 3, 5, Distance::Hellinger, Transform::None).unwrap();
        let ds: Vec<DistanceMatrix> = (0..3)
            .map(|r| {
                Distance::Hellinger
                    .compute(&rarefy(&y, 10, 5, r).unwrap())
                    .unwrap()
            })
            .collect();
        for k in 0..3 {
            let mean = ds.iter().map(|d| d.condensed()[k]).sum::<f64>() / 3.0;
            assert!((m.condensed()[k] - mean).abs() < 1e-12);
        }
    }
}
