//! Confidence ellipses for a group centroid on two ordination axes.
//!
//! Owns the normal-theory (Hotelling T²) confidence region of a bivariate
//! mean and its drawing as a closed polyline; nothing about plotting styles.
//!
//! Method. For a group of `n` points on two axes with mean `m` and sample
//! covariance `S` (denominator `n − 1`), the `100(1 − α)%` confidence region of
//! the true centroid `μ` is
//!
//! ```text
//! (μ − m)' S^{-1} (μ − m) <= c,   c = 2(n − 1) / (n (n − 2)) · F_{1−α; 2, n−2}
//! ```
//!
//! (Hotelling's T² region for a mean vector with p = 2; Johnson & Wichern,
//! *Applied Multivariate Statistical Analysis*, chapter on inferences about a
//! mean vector — cited from memory.) This is a region for the *centroid*, not
//! the spread of the points (a data ellipse is larger by a factor of about
//! `sqrt(n + 1)`). Writing `S = V diag(l₁, l₂) V'`, the boundary is
//! `x(θ) = m + V diag(√(c l₁), √(c l₂)) (cos θ, sin θ)'`.
//!
//! The F quantile with 2 numerator degrees of freedom has a closed form: the
//! F(2, d) distribution function is `1 − (d / (d + 2x))^{d/2}` (the regularised
//! incomplete beta `I_z(1, d/2) = 1 − (1 − z)^{d/2}` at `z = 2x / (2x + d)`), so
//! `F_p(2, d) = (d / 2)((1 − p)^{−2/d} − 1)`.
//!
//! Groups with fewer than 3 points have no ellipse (`n − 2` degrees of
//! freedom are needed). Collinear points give a degenerate ellipse (a segment);
//! identical points a single point. Ordination coordinates are themselves
//! estimated, so the region is approximate; callers should say so.

use serde::Serialize;

use super::error::AnalysisError;

/// A confidence ellipse for one group's centroid.
#[derive(Debug, Clone, Serialize)]
pub struct CentroidEllipse {
    /// Number of points in the group.
    pub n: usize,
    /// Confidence level (e.g. 0.95).
    pub level: f64,
    /// Group mean `m` on the two axes.
    pub centre: [f64; 2],
    /// Sample covariance `S` (denominator `n − 1`), row-major 2 × 2.
    pub covariance: [[f64; 2]; 2],
    /// `F_{level; 2, n−2}`.
    pub f_quantile: f64,
    /// Bound `c` on `(μ − m)' S^{-1} (μ − m)`.
    pub critical: f64,
    /// Semi-axis lengths `√(c l₁) >= √(c l₂)`.
    pub semi_axes: [f64; 2],
    /// Angle of the major axis from the first axis, radians in `(−π/2, π/2]`.
    pub angle: f64,
    /// Closed boundary polyline (first point repeated at the end).
    pub boundary: Vec<[f64; 2]>,
}

impl CentroidEllipse {
    /// Whether `point` lies inside or on the region,
    /// i.e. `(point − m)' S^{-1} (point − m) <= c`. Always false for a
    /// degenerate (singular) covariance unless the point is the centre.
    pub fn contains(&self, point: [f64; 2]) -> bool {
        let [[a, b], [_, d]] = self.covariance;
        let det = a * d - b * b;
        let dx = point[0] - self.centre[0];
        let dy = point[1] - self.centre[1];
        if det <= 0.0 {
            return dx == 0.0 && dy == 0.0;
        }
        let q = (d * dx * dx - 2.0 * b * dx * dy + a * dy * dy) / det;
        q <= self.critical
    }
}

/// Quantile of the F distribution with 2 and `df2` degrees of freedom:
/// `(df2 / 2)((1 − p)^{−2/df2} − 1)` (closed form, see the module notes).
///
/// # Errors
/// [`AnalysisError::InvalidArgument`] unless `0 < p < 1` and `df2 > 0`.
///
/// # Examples
/// ```
/// use tally::analysis::ellipse::f_quantile_2;
/// // F(2, 2): CDF 1 − 1/(1 + x), so the 0.95 quantile is 19.
/// assert!((f_quantile_2(0.95, 2.0).unwrap() - 19.0).abs() < 1e-9);
/// ```
pub fn f_quantile_2(p: f64, df2: f64) -> Result<f64, AnalysisError> {
    if !(p > 0.0 && p < 1.0) {
        return Err(AnalysisError::InvalidArgument {
            name: "level",
            reason: format!("must lie strictly between 0 and 1, got {p}"),
        });
    }
    if !(df2 > 0.0 && df2.is_finite()) {
        return Err(AnalysisError::InvalidArgument {
            name: "df2",
            reason: format!("must be positive, got {df2}"),
        });
    }
    // (1-p)^(-2/d) - 1 computed as expm1 for accuracy when d is large.
    Ok(df2 / 2.0 * ((-2.0 / df2) * (1.0 - p).ln()).exp_m1())
}

/// The Hotelling confidence ellipse of the centroid of the points
/// `(x[i], y[i])` at confidence `level`, drawn with `segments` segments.
///
/// Reference: Johnson & Wichern, *Applied Multivariate Statistical Analysis*
/// (T² confidence region for a mean vector), cited from memory;
/// docs/methods.md, "Ordination and centroid ellipses (tally ordinate)".
///
/// # Errors
/// [`AnalysisError::DimensionMismatch`] when `x` and `y` differ in length;
/// [`AnalysisError::TooFewSamples`] for fewer than 3 points;
/// [`AnalysisError::NonFinite`] for a NaN or infinite coordinate (row = point,
/// col = axis); [`AnalysisError::InvalidArgument`] for a level outside (0, 1)
/// or fewer than 8 segments.
///
/// # Examples
/// ```
/// use tally::analysis::ellipse::centroid_ellipse;
/// let e = centroid_ellipse(&[0., 1., 2., 1.], &[0., 1., 0., -1.], 0.95, 64).unwrap();
/// assert!(e.contains(e.centre));
/// assert_eq!(e.boundary.len(), 65);
/// ```
pub fn centroid_ellipse(
    x: &[f64],
    y: &[f64],
    level: f64,
    segments: usize,
) -> Result<CentroidEllipse, AnalysisError> {
    if x.len() != y.len() {
        return Err(AnalysisError::DimensionMismatch {
            expected: x.len(),
            found: y.len(),
        });
    }
    let n = x.len();
    if n < 3 {
        return Err(AnalysisError::TooFewSamples { found: n, min: 3 });
    }
    for (i, (a, b)) in x.iter().zip(y).enumerate() {
        if !a.is_finite() {
            return Err(AnalysisError::NonFinite { row: i, col: 0 });
        }
        if !b.is_finite() {
            return Err(AnalysisError::NonFinite { row: i, col: 1 });
        }
    }
    if segments < 8 {
        return Err(AnalysisError::InvalidArgument {
            name: "segments",
            reason: format!("at least 8 are needed to draw an ellipse, got {segments}"),
        });
    }
    let nf = n as f64;
    let f = f_quantile_2(level, nf - 2.0)?;
    let critical = 2.0 * (nf - 1.0) / (nf * (nf - 2.0)) * f;
    let mx = x.iter().sum::<f64>() / nf;
    let my = y.iter().sum::<f64>() / nf;
    let (mut sxx, mut sxy, mut syy) = (0.0, 0.0, 0.0);
    for (a, b) in x.iter().zip(y) {
        sxx += (a - mx) * (a - mx);
        sxy += (a - mx) * (b - my);
        syy += (b - my) * (b - my);
    }
    sxx /= nf - 1.0;
    sxy /= nf - 1.0;
    syy /= nf - 1.0;
    // Closed-form eigen-decomposition of the symmetric 2 × 2 covariance.
    let half_tr = 0.5 * (sxx + syy);
    let disc = (0.25 * (sxx - syy).powi(2) + sxy * sxy).sqrt();
    let l1 = half_tr + disc;
    let l2 = (half_tr - disc).max(0.0);
    let angle = if sxy == 0.0 && sxx >= syy {
        0.0
    } else if sxy == 0.0 {
        std::f64::consts::FRAC_PI_2
    } else {
        0.5 * (2.0 * sxy).atan2(sxx - syy)
    };
    let a1 = (critical * l1).sqrt();
    let a2 = (critical * l2).sqrt();
    let (s, c) = angle.sin_cos();
    let boundary = (0..=segments)
        .map(|k| {
            let t = std::f64::consts::TAU * (k % segments) as f64 / segments as f64;
            let (u, v) = (a1 * t.cos(), a2 * t.sin());
            [mx + c * u - s * v, my + s * u + c * v]
        })
        .collect();
    Ok(CentroidEllipse {
        n,
        level,
        centre: [mx, my],
        covariance: [[sxx, sxy], [sxy, syy]],
        f_quantile: f,
        critical,
        semi_axes: [a1, a2],
        angle,
        boundary,
    })
}

/// Ellipses for several groups at once: `groups[i]` is the group index of
/// point `i` (groups numbered `0..n_groups`). Groups with fewer than 3 points
/// get `None` (no ellipse); all others get their [`centroid_ellipse`].
///
/// # Errors
/// [`AnalysisError::DimensionMismatch`] when lengths differ; otherwise as
/// [`centroid_ellipse`].
///
/// # Examples
/// ```
/// use tally::analysis::ellipse::group_ellipses;
/// let x = [0., 1., 2., 5., 6.];
/// let y = [0., 1., 0., 5., 6.];
/// let e = group_ellipses(&x, &y, &[0, 0, 0, 1, 1], 0.95, 32).unwrap();
/// assert!(e[0].is_some() && e[1].is_none());
/// ```
pub fn group_ellipses(
    x: &[f64],
    y: &[f64],
    groups: &[usize],
    level: f64,
    segments: usize,
) -> Result<Vec<Option<CentroidEllipse>>, AnalysisError> {
    if groups.len() != x.len() {
        return Err(AnalysisError::DimensionMismatch {
            expected: x.len(),
            found: groups.len(),
        });
    }
    if y.len() != x.len() {
        return Err(AnalysisError::DimensionMismatch {
            expected: x.len(),
            found: y.len(),
        });
    }
    let k = groups.iter().max().map_or(0, |g| g + 1);
    (0..k)
        .map(|g| {
            let idx: Vec<usize> = (0..x.len()).filter(|&i| groups[i] == g).collect();
            if idx.len() < 3 {
                return Ok(None);
            }
            let gx: Vec<f64> = idx.iter().map(|&i| x[i]).collect();
            let gy: Vec<f64> = idx.iter().map(|&i| y[i]).collect();
            centroid_ellipse(&gx, &gy, level, segments).map(Some)
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;
    use rand::{RngExt, SeedableRng, rngs::ChaCha8Rng};
    use serde_json::Value;

    const FIXTURE: &str = include_str!("../../tests/reference/ordination.json");

    #[test]
    fn f_quantile_matches_scipy() {
        let fx: Value =
            serde_json::from_str(FIXTURE).expect("invariant: committed fixture is valid JSON");
        let rows = fx["f_quantiles"].as_array().unwrap();
        assert!(rows.len() >= 20);
        for row in rows {
            let level = row["level"].as_f64().unwrap();
            let df2 = row["df2"].as_f64().unwrap();
            // scipy.stats.f.ppf(level, 2, df2)
            let expected = row["ppf"].as_f64().unwrap();
            assert_relative_eq!(
                f_quantile_2(level, df2).unwrap(),
                expected,
                max_relative = 1e-10
            );
        }
        assert!(f_quantile_2(1.0, 3.0).is_err());
        assert!(f_quantile_2(0.95, 0.0).is_err());
    }

    #[test]
    fn critical_value_for_five_points() {
        // docs/methods.md, "Ellipse constants": n = 5 gives F.95(2,3) = 9.552094
        // (scipy.stats.f.ppf, tests/reference/ordination.json) and
        // c = 2*4/(5*3) * 9.552094 = 5.094450.
        let e = centroid_ellipse(&[0., 1., 2., 3., 1.], &[1., 0., 2., 1., 3.], 0.95, 16).unwrap();
        assert!((e.f_quantile - 9.552094).abs() < 5e-7);
        assert!((e.critical - 5.094450).abs() < 5e-7);
    }

    #[test]
    fn boundary_lies_on_the_region_edge() {
        let x = [0.3, 1.1, 2.0, 1.4, 0.2, 1.9, 2.7];
        let y = [0.1, 1.5, 1.8, 0.4, -0.6, 2.6, 2.2];
        let e = centroid_ellipse(&x, &y, 0.95, 90).unwrap();
        let [[a, b], [_, d]] = e.covariance;
        let det = a * d - b * b;
        for p in &e.boundary {
            let dx = p[0] - e.centre[0];
            let dy = p[1] - e.centre[1];
            let q = (d * dx * dx - 2.0 * b * dx * dy + a * dy * dy) / det;
            assert_relative_eq!(q, e.critical, max_relative = 1e-10);
        }
        assert_eq!(e.boundary.first(), e.boundary.last());
        assert!(e.semi_axes[0] >= e.semi_axes[1]);
    }

    fn normal(rng: &mut ChaCha8Rng) -> f64 {
        // Box-Muller transform.
        let u1: f64 = 1.0 - rng.random::<f64>();
        let u2: f64 = rng.random::<f64>();
        (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
    }

    #[test]
    fn coverage_of_the_true_mean_is_nominal() {
        // Simulation with known truth: n = 5 points from a correlated bivariate normal
        // with mean (2, -1). The Hotelling region must cover the mean in 95 % of
        // replicates; reps = 4000 gives a binomial sd of sqrt(.95*.05/4000) = 0.00345,
        // and the tolerance is 4 sd. The large-sample region with chi2_.95(2)/n
        // (5.991465/n = -2 ln(0.05)/n; docs/methods.md, "Ellipse constants") under-covers
        // badly at n = 5, which shows the test can tell the two apart.
        let reps = 4000;
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        let (mut hit, mut hit_large) = (0usize, 0usize);
        for _ in 0..reps {
            let mut x = [0.0; 5];
            let mut y = [0.0; 5];
            for i in 0..5 {
                let (z1, z2) = (normal(&mut rng), normal(&mut rng));
                x[i] = 2.0 + 1.5 * z1;
                y[i] = -1.0 + 0.8 * z1 + 0.5 * z2;
            }
            let e = centroid_ellipse(&x, &y, 0.95, 16).unwrap();
            if e.contains([2.0, -1.0]) {
                hit += 1;
            }
            let large = CentroidEllipse {
                critical: 5.991465 / 5.0,
                ..e
            };
            if large.contains([2.0, -1.0]) {
                hit_large += 1;
            }
        }
        let rate = hit as f64 / reps as f64;
        let sd = (0.95_f64 * 0.05 / reps as f64).sqrt();
        assert!((rate - 0.95).abs() < 4.0 * sd, "coverage {rate}");
        let rate_large = hit_large as f64 / reps as f64;
        assert!(
            rate_large < 0.95 - 8.0 * sd,
            "large-sample coverage {rate_large}"
        );
    }

    #[test]
    fn small_groups_and_bad_input() {
        assert_eq!(
            centroid_ellipse(&[0., 1.], &[0., 1.], 0.95, 16).unwrap_err(),
            AnalysisError::TooFewSamples { found: 2, min: 3 }
        );
        assert_eq!(
            centroid_ellipse(&[0., 1., 2.], &[0., 1.], 0.95, 16).unwrap_err(),
            AnalysisError::DimensionMismatch {
                expected: 3,
                found: 2
            }
        );
        assert_eq!(
            centroid_ellipse(&[0., 1., 2.], &[0., f64::NAN, 1.], 0.95, 16).unwrap_err(),
            AnalysisError::NonFinite { row: 1, col: 1 }
        );
        assert!(centroid_ellipse(&[0., 1., 2.], &[0., 2., 1.], 0.95, 4).is_err());
        // Collinear points: the minor semi-axis is zero (a segment), no error.
        let e = centroid_ellipse(&[0., 1., 2., 3.], &[0., 2., 4., 6.], 0.95, 16).unwrap();
        assert!(e.semi_axes[1].abs() < 1e-9 * e.semi_axes[0]);
        assert_relative_eq!(e.angle, 2.0_f64.atan(), max_relative = 1e-12);
        let g = group_ellipses(
            &[0., 1., 2., 9., 5.],
            &[0., 2., 1., 9., 5.],
            &[0, 0, 0, 2, 1],
            0.95,
            16,
        )
        .unwrap();
        assert_eq!(g.len(), 3);
        assert!(g[0].is_some() && g[1].is_none() && g[2].is_none());
    }
}
