//! The log-linear count model: Poisson regression with a log link and a
//! log-effort offset, fitted by iteratively reweighted least squares
//! (McCullagh & Nelder 1989, *Generalized Linear Models*, 2nd ed., ch. 6):
//! `y_i ~ Poisson(mu_i)`, `log mu_i = x_i' beta + offset_i`.
//!
//! Owns: [`PoissonFit`], [`poisson_glm`], [`ScoreTest`] (Rao 1948, Proc.
//! Cambridge Philos. Soc. 44:50-57), [`all_zero_levels`], [`pooled_rates`].
//! Every weighted least-squares step goes through a QR factorisation of
//! `sqrt(W) X`; the normal equations are never formed. Pure numerics: no I/O.
//! The stopping rule is statsmodels' (`|dev_old - dev| / (|dev| + 0.1) < 1e-10`);
//! the fixtures in `tests/reference/count_model.json` come from statsmodels' GLM.

use nalgebra::{DMatrix, DVector};

use super::AnalysisError;

/// Maximum number of IRLS iterations before [`poisson_glm`] gives up.
const MAX_ITER: usize = 100;
/// Relative deviance change below which IRLS stops (statsmodels' rule).
const TOL: f64 = 1e-10;

/// A fitted Poisson log-linear model.
#[derive(Debug, Clone, PartialEq)]
pub struct PoissonFit {
    /// Estimated coefficients `beta`, one per column of the design.
    pub coefficients: Vec<f64>,
    /// Model-based standard errors (Poisson variance, scale 1).
    pub std_errors: Vec<f64>,
    /// (X' W X)^{-1} at the solution.
    pub covariance: DMatrix<f64>,
    /// Fitted means `mu` (counts on the scale of the effort given).
    pub fitted: Vec<f64>,
    /// Deviance `2 Σ [y ln(y/mu) - (y - mu)]`, with `y ln y = 0` at `y = 0`.
    pub deviance: f64,
    /// Pearson statistic `Σ (y - mu)² / mu`.
    pub pearson_chi2: f64,
    /// Residual degrees of freedom, `n - rank`.
    pub df_resid: usize,
    /// Number of IRLS iterations performed.
    pub iterations: usize,
}

impl PoissonFit {
    /// Pearson dispersion φ = χ²/df_resid (quasi-Poisson scale).
    pub fn dispersion(&self) -> f64 {
        self.pearson_chi2 / self.df_resid as f64
    }

    /// Standard errors scaled by sqrt(φ) (statsmodels' fit(scale="X2")).
    pub fn scaled_std_errors(&self) -> Vec<f64> {
        let s = self.dispersion().sqrt();
        self.std_errors.iter().map(|se| se * s).collect()
    }
}

/// Poisson deviance `2 Σ [y ln(y/mu) - (y - mu)]` (the `y ln y` term is 0 at `y = 0`).
fn deviance(y: &[f64], mu: &[f64]) -> f64 {
    2.0 * y
        .iter()
        .zip(mu)
        .map(|(&yi, &mi)| {
            let log_term = if yi > 0.0 { yi * (yi / mi).ln() } else { 0.0 };
            log_term - (yi - mi)
        })
        .sum::<f64>()
}

/// `sqrt(w_i) x_i` row by row.
fn weighted_design(x: &DMatrix<f64>, sqrt_w: &[f64]) -> DMatrix<f64> {
    DMatrix::from_fn(x.nrows(), x.ncols(), |i, j| sqrt_w[i] * x[(i, j)])
}

/// Numerical rank of `x` from a column-pivoted QR: diagonal entries of R
/// above `max(n, p) · ε · |R_11|` count.
fn numerical_rank(x: &DMatrix<f64>) -> usize {
    let (n, p) = x.shape();
    let r = x.clone().col_piv_qr().r();
    let k = n.min(p);
    let largest = (0..k).map(|i| r[(i, i)].abs()).fold(0.0, f64::max);
    if largest == 0.0 {
        return 0;
    }
    let tol = n.max(p) as f64 * f64::EPSILON * largest;
    (0..k).filter(|&i| r[(i, i)].abs() > tol).count()
}

/// Upper-triangular R of a QR of `a` (p × p, `a` has full column rank) and Q (n × p).
fn thin_qr(a: DMatrix<f64>) -> Result<(DMatrix<f64>, DMatrix<f64>), AnalysisError> {
    let p = a.ncols();
    let qr = a.qr();
    let (q, r) = (qr.q(), qr.r());
    let largest = (0..p).map(|i| r[(i, i)].abs()).fold(0.0, f64::max);
    if (0..p).any(|i| r[(i, i)].abs() <= 1e-13 * largest) || largest == 0.0 || !largest.is_finite()
    {
        return Err(AnalysisError::Numerical(
            "weighted design became rank deficient during poisson irls".into(),
        ));
    }
    Ok((q, r))
}

fn check_inputs(y: &[f64], x: &DMatrix<f64>, offset: &[f64]) -> Result<usize, AnalysisError> {
    let (n, p) = x.shape();
    if y.len() != n {
        return Err(AnalysisError::DimensionMismatch {
            expected: n,
            found: y.len(),
        });
    }
    if offset.len() != n {
        return Err(AnalysisError::DimensionMismatch {
            expected: n,
            found: offset.len(),
        });
    }
    if p == 0 {
        return Err(AnalysisError::InvalidArgument {
            name: "x",
            reason: "the design has no columns".into(),
        });
    }
    for (row, &v) in y.iter().enumerate() {
        if !v.is_finite() {
            return Err(AnalysisError::NonFinite { row, col: 0 });
        }
        if v < 0.0 {
            return Err(AnalysisError::Negative { row, col: 0 });
        }
    }
    for (row, &v) in offset.iter().enumerate() {
        if !v.is_finite() {
            return Err(AnalysisError::NonFinite { row, col: 0 });
        }
    }
    for col in 0..p {
        for row in 0..n {
            if !x[(row, col)].is_finite() {
                return Err(AnalysisError::NonFinite { row, col });
            }
        }
    }
    let rank = numerical_rank(x);
    if rank < p {
        return Err(AnalysisError::InvalidArgument {
            name: "x",
            reason: format!("the design is rank deficient: rank {rank} for {p} columns"),
        });
    }
    if n <= rank {
        return Err(AnalysisError::Saturated { rank, n });
    }
    Ok(rank)
}

/// Fit the Poisson log-linear model `log mu = X beta + offset` by IRLS
/// (McCullagh & Nelder 1989, section 6.2; start `mu = y + 0.5`; stop when
/// `|dev_old - dev| / (|dev| + 0.1) < 1e-10`, at most 100 iterations).
///
/// `x` is the n × p design (intercept included by the caller), `offset` the
/// log effort (zeros for equal effort). Zero counts are fine; a level whose
/// counts are all zero has no finite estimate (drop it first, see
/// [`all_zero_levels`]).
///
/// # Errors
/// [`AnalysisError::DimensionMismatch`] when `y` or `offset` disagree with the
/// rows of `x`; [`AnalysisError::NonFinite`] for NaN or infinite `y`, `offset` or
/// `x`; [`AnalysisError::Negative`] for a negative count;
/// [`AnalysisError::InvalidArgument`] for an empty or rank-deficient design;
/// [`AnalysisError::Saturated`] when `n ≤ rank`; [`AnalysisError::Numerical`]
/// when IRLS diverges or does not converge within 100 iterations.
pub fn poisson_glm(
    y: &[f64],
    x: &DMatrix<f64>,
    offset: &[f64],
) -> Result<PoissonFit, AnalysisError> {
    let rank = check_inputs(y, x, offset)?;
    let n = y.len();
    let mut mu: Vec<f64> = y.iter().map(|&v| v + 0.5).collect();
    let mut eta: Vec<f64> = mu.iter().map(|m| m.ln()).collect();
    let mut dev_old = deviance(y, &mu);
    let mut beta = DVector::zeros(x.ncols());
    let mut iterations = 0;
    let mut converged = false;
    while iterations < MAX_ITER {
        iterations += 1;
        let sqrt_w: Vec<f64> = mu.iter().map(|m| m.sqrt()).collect();
        let a = weighted_design(x, &sqrt_w);
        let b = DVector::from_fn(n, |i, _| {
            let z = eta[i] - offset[i] + (y[i] - mu[i]) / mu[i];
            sqrt_w[i] * z
        });
        let (q, r) = thin_qr(a)?;
        let qtb = q.transpose() * b;
        beta = r.solve_upper_triangular(&qtb).ok_or_else(|| {
            AnalysisError::Numerical("singular triangular factor in poisson irls".into())
        })?;
        let xb = x * &beta;
        eta = (0..n).map(|i| xb[i] + offset[i]).collect();
        mu = eta.iter().map(|e| e.exp()).collect();
        if mu.iter().any(|m| !m.is_finite() || *m <= 0.0) {
            return Err(AnalysisError::Numerical(
                "poisson irls diverged (fitted mean overflowed or vanished)".into(),
            ));
        }
        let dev = deviance(y, &mu);
        if (dev_old - dev).abs() / (dev.abs() + 0.1) < TOL {
            converged = true;
            break;
        }
        dev_old = dev;
    }
    if !converged {
        return Err(AnalysisError::Numerical(format!(
            "poisson irls did not converge in {MAX_ITER} iterations"
        )));
    }
    // Covariance at the solution: (X'WX)^{-1} = R^{-1} R^{-T} for sqrt(W) X = Q R.
    let sqrt_w: Vec<f64> = mu.iter().map(|m| m.sqrt()).collect();
    let (_, r) = thin_qr(weighted_design(x, &sqrt_w))?;
    let p = x.ncols();
    let r_inv = r
        .solve_upper_triangular(&DMatrix::identity(p, p))
        .ok_or_else(|| AnalysisError::Numerical("singular information matrix".into()))?;
    let covariance = &r_inv * r_inv.transpose();
    let std_errors = (0..p).map(|j| covariance[(j, j)].sqrt()).collect();
    let pearson_chi2 = y
        .iter()
        .zip(&mu)
        .map(|(&yi, &mi)| (yi - mi) * (yi - mi) / mi)
        .sum();
    Ok(PoissonFit {
        coefficients: beta.iter().copied().collect(),
        std_errors,
        covariance,
        deviance: deviance(y, &mu),
        fitted: mu,
        pearson_chi2,
        df_resid: n - rank,
        iterations,
    })
}

/// Score statistic of adding column `extra` to the fitted model `fit` of design `x`:
/// U = extra'(y - mu), V = extra' W extra - extra' W X (X'WX)^{-1} X' W extra, S = U²/V
/// (Rao score test; W = diag(mu)). Pre-compute what does not depend on `extra`.
///
/// Holds `sqrt(mu)`, the residuals `y - mu` and an orthonormal basis Q of
/// `sqrt(W) X`, so each [`ScoreTest::statistic`] costs O(n·p):
/// `V = ||sqrt(W) e||² - ||Q' sqrt(W) e||²`. Under the reduced model S is
/// asymptotically χ² with 1 df (Rao 1948).
#[derive(Debug, Clone)]
pub struct ScoreTest {
    /// `sqrt(mu_i)`.
    sqrt_w: Vec<f64>,
    /// `y_i - mu_i`.
    resid: Vec<f64>,
    /// Orthonormal basis (n × p) of the column space of `sqrt(W) X`.
    q: DMatrix<f64>,
}

impl ScoreTest {
    /// Prepare score tests against the fitted model `fit` of `y` on design `x`.
    ///
    /// # Panics
    /// When `y`, `x` and `fit.fitted` disagree in length, or when `sqrt(W) X`
    /// cannot be factorised (it always can for a design [`poisson_glm`] accepted).
    pub fn new(y: &[f64], x: &DMatrix<f64>, fit: &PoissonFit) -> Self {
        assert_eq!(y.len(), x.nrows(), "y and x disagree in rows");
        assert_eq!(fit.fitted.len(), x.nrows(), "fit and x disagree in rows");
        let sqrt_w: Vec<f64> = fit.fitted.iter().map(|m| m.sqrt()).collect();
        let resid = y.iter().zip(&fit.fitted).map(|(a, b)| a - b).collect();
        let (q, _) = thin_qr(weighted_design(x, &sqrt_w))
            .expect("invariant: the design of a fitted model has full column rank");
        Self { sqrt_w, resid, q }
    }

    /// Score statistic `S = U² / V` of the candidate column `extra` (length n).
    /// Returns NaN when `extra` lies in the column space of the design
    /// (`V ≤ 1e-12 · ||sqrt(W) e||²`: the column adds nothing).
    ///
    /// # Panics
    /// When `extra` does not have one entry per row.
    pub fn statistic(&self, extra: &[f64]) -> f64 {
        assert_eq!(extra.len(), self.resid.len(), "extra has the wrong length");
        let u: f64 = extra.iter().zip(&self.resid).map(|(e, r)| e * r).sum();
        let se = DVector::from_iterator(
            extra.len(),
            extra.iter().zip(&self.sqrt_w).map(|(e, s)| e * s),
        );
        let total = se.norm_squared();
        let projected = (self.q.transpose() * &se).norm_squared();
        let v = total - projected;
        if v.is_nan() || v <= 1e-12 * total {
            return f64::NAN;
        }
        u * u / v
    }
}

impl ScoreTest {
    /// The score test for candidate columns that depend on the row's group only,
    /// `extra = A v` (A: rows × `k` group indicators from `codes`, v: one value per
    /// group), reduced to `k`-vectors and `k × k` matrices: `U = v'(A'r)` and
    /// `V = v'(diag(Σ w) − B B')v` with `B = A' sqrt(W) Q`. Each
    /// [`GroupedScore::statistic`] then costs O(k²) whatever the number of rows
    /// (the year permutations of a trend relabel whole years).
    ///
    /// # Panics
    /// When `codes` does not have one entry per row or a code is `≥ k`.
    pub fn grouped(&self, codes: &[usize], k: usize) -> GroupedScore {
        assert_eq!(codes.len(), self.resid.len(), "codes have the wrong length");
        let p = self.q.ncols();
        let mut u = DVector::zeros(k);
        let mut b: DMatrix<f64> = DMatrix::zeros(k, p);
        let mut wsum = vec![0.0; k];
        for (i, &c) in codes.iter().enumerate() {
            u[c] += self.resid[i];
            wsum[c] += self.sqrt_w[i] * self.sqrt_w[i];
            for j in 0..p {
                b[(c, j)] += self.sqrt_w[i] * self.q[(i, j)];
            }
        }
        let mut v: DMatrix<f64> = -(&b * b.transpose());
        for (j, w) in wsum.iter().enumerate() {
            v[(j, j)] += w;
        }
        GroupedScore { u, v, wsum }
    }
}

/// The score test of group-level columns ([`ScoreTest::grouped`]).
#[derive(Debug, Clone)]
pub struct GroupedScore {
    /// `A'(y − mu)`.
    u: DVector<f64>,
    /// `A'WA − (A' sqrt(W) Q)(A' sqrt(W) Q)'`.
    v: DMatrix<f64>,
    /// Fitted weight of each group, `Σ mu` over its rows.
    wsum: Vec<f64>,
}

impl GroupedScore {
    /// `(U, V)` of the column `A v`; `None` when the column lies (numerically) in
    /// the column space of the design (`V ≤ 1e-12 · Σ w v²`).
    pub fn parts(&self, v: &[f64]) -> Option<(f64, f64)> {
        assert_eq!(v.len(), self.u.len(), "one value per group");
        let vv = DVector::from_column_slice(v);
        let big_u = self.u.dot(&vv);
        let big_v = (vv.transpose() * &self.v * &vv)[(0, 0)];
        let scale: f64 = v.iter().zip(&self.wsum).map(|(a, w)| a * a * w).sum();
        (big_v > 1e-12 * scale && big_v > 0.0).then_some((big_u, big_v))
    }

    /// Score statistic `U² / V` of the column `A v` (NaN when it adds nothing), equal
    /// to [`ScoreTest::statistic`] of the expanded column.
    pub fn statistic(&self, v: &[f64]) -> f64 {
        self.parts(v).map_or(f64::NAN, |(u, w)| u * u / w)
    }

    /// The one-step (Fisher scoring) coefficient `U / V` of the column `A v` from the
    /// fitted means: the change in its coefficient one IRLS step would make, starting
    /// at 0. 0 when the column adds nothing.
    pub fn one_step(&self, v: &[f64]) -> f64 {
        self.parts(v).map_or(0.0, |(u, w)| u / w)
    }
}

/// Sites (levels of `codes`) whose every count is zero: their site effect has no finite
/// estimate, so callers drop them before fitting (they carry no information on ratios).
///
/// Levels with no rows at all are not listed. Returned in increasing order.
///
/// # Panics
/// When `y` and `codes` differ in length or a code is `≥ n_levels`.
pub fn all_zero_levels(y: &[f64], codes: &[usize], n_levels: usize) -> Vec<usize> {
    assert_eq!(y.len(), codes.len(), "y and codes differ in length");
    let mut rows = vec![0usize; n_levels];
    let mut any_positive = vec![false; n_levels];
    for (&v, &c) in y.iter().zip(codes) {
        rows[c] += 1;
        if v != 0.0 {
            any_positive[c] = true;
        }
    }
    (0..n_levels)
        .filter(|&k| rows[k] > 0 && !any_positive[k])
        .collect()
}

/// Pooled rate `r = Σy / Σe` of some rows and the variance of `ln r`: the ratio
/// estimator's variance `n Σ (y_i − r e_i)² / ((n − 1)(Σe)²)` (Cochran 1977,
/// *Sampling Techniques*, 3rd ed., section 6.4; from memory) over `r²` (delta
/// method). The variance is `None` for fewer than two rows or a rate of zero.
pub fn rate_log_variance(y: &[f64], e: &[f64]) -> (f64, Option<f64>) {
    let n = y.len();
    let sy: f64 = y.iter().sum();
    let se: f64 = e.iter().sum();
    let r = sy / se;
    if n < 2 || super::prec::not_positive(r) {
        return (r, None);
    }
    let ss: f64 = y.iter().zip(e).map(|(a, b)| (a - r * b).powi(2)).sum();
    let var = n as f64 / (n as f64 - 1.0) * ss / (se * se);
    (r, Some(var / (r * r)))
}

/// The inputs of a per-taxon count model: `counts` (rows × taxa) finite and
/// non-negative, `effort` positive, and every slice of `lens` as long as the
/// rows. One check for every per-taxon kernel ([`super::taxa::contrast`],
/// [`super::taxa::baci_contrast`], [`super::trend::taxon_trends`]).
///
/// # Errors
/// [`AnalysisError::DimensionMismatch`], [`AnalysisError::NonFinite`],
/// [`AnalysisError::Negative`], or [`AnalysisError::InvalidArgument`] for effort.
pub fn check_taxon_counts(
    counts: &DMatrix<f64>,
    effort: &[f64],
    lens: &[usize],
) -> Result<(), AnalysisError> {
    let (n, p) = counts.shape();
    for &len in std::iter::once(&effort.len()).chain(lens) {
        if len != n {
            return Err(AnalysisError::DimensionMismatch {
                expected: n,
                found: len,
            });
        }
    }
    for i in 0..n {
        for j in 0..p {
            let v = counts[(i, j)];
            if !v.is_finite() {
                return Err(AnalysisError::NonFinite { row: i, col: j });
            }
            if v < 0.0 {
                return Err(AnalysisError::Negative { row: i, col: j });
            }
        }
    }
    if let Some(i) = effort.iter().position(|e| !(e.is_finite() && *e > 0.0)) {
        return Err(AnalysisError::InvalidArgument {
            name: "effort",
            reason: format!("row {i} has effort {}; effort must be positive", effort[i]),
        });
    }
    Ok(())
}

/// Pooled rate of each group: Σ y / Σ effort over its rows (the fitted rate of a one-factor
/// Poisson model with log-effort offset).
///
/// A level with no rows (or zero total effort) gets NaN (or ±∞ for counts over no effort).
///
/// # Panics
/// When `y`, `effort` and `codes` differ in length or a code is `≥ n_levels`.
pub fn pooled_rates(y: &[f64], effort: &[f64], codes: &[usize], n_levels: usize) -> Vec<f64> {
    assert_eq!(y.len(), codes.len(), "y and codes differ in length");
    assert_eq!(
        effort.len(),
        codes.len(),
        "effort and codes differ in length"
    );
    let mut count = vec![0.0; n_levels];
    let mut total_effort = vec![0.0; n_levels];
    for ((&v, &e), &c) in y.iter().zip(effort).zip(codes) {
        count[c] += v;
        total_effort[c] += e;
    }
    count
        .iter()
        .zip(&total_effort)
        .map(|(c, e)| c / e)
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::Value;

    const FIXTURE: &str = include_str!("../../tests/reference/count_model.json");

    fn fixture() -> Value {
        serde_json::from_str(FIXTURE).expect("invariant: committed fixture is valid JSON")
    }

    fn floats(v: &Value) -> Vec<f64> {
        v.as_array()
            .unwrap()
            .iter()
            .map(|x| x.as_f64().unwrap())
            .collect()
    }

    fn codes(v: &Value) -> Vec<usize> {
        v.as_array()
            .unwrap()
            .iter()
            .map(|x| x.as_u64().unwrap() as usize)
            .collect()
    }

    fn design(v: &Value) -> DMatrix<f64> {
        let rows: Vec<Vec<f64>> = v.as_array().unwrap().iter().map(floats).collect();
        DMatrix::from_fn(rows.len(), rows[0].len(), |i, j| rows[i][j])
    }

    /// y, design, offset = ln(effort) of a fixture case.
    fn inputs(case: &Value) -> (Vec<f64>, DMatrix<f64>, Vec<f64>) {
        let y = floats(&case["y"]);
        let x = design(&case["x"]);
        let offset = floats(&case["effort"]).iter().map(|e| e.ln()).collect();
        (y, x, offset)
    }

    fn close(got: f64, want: f64, what: &str) {
        assert!(
            (got - want).abs() <= 1e-8 * want.abs() + 1e-12,
            "{what}: {got} vs {want}"
        );
    }

    fn close_all(got: &[f64], want: &[f64], what: &str) {
        assert_eq!(got.len(), want.len(), "{what}: length");
        for (j, (g, w)) in got.iter().zip(want).enumerate() {
            close(*g, *w, &format!("{what}[{j}]"));
        }
    }

    #[test]
    fn poisson_fit_matches_statsmodels_glm() {
        let fx = fixture();
        let cases = fx["cases"].as_object().unwrap();
        assert_eq!(cases.len(), 4);
        for (name, case) in cases {
            let (y, x, offset) = inputs(case);
            assert!(
                y.iter().filter(|&&v| v == 0.0).count() >= 5,
                "{name}: zeros"
            );
            let fit = poisson_glm(&y, &x, &offset).unwrap();
            // statsmodels GLM Poisson with log-effort offset: params
            close_all(&fit.coefficients, &floats(&case["params"]), name);
            // statsmodels GLM Poisson with log-effort offset: bse
            close_all(&fit.std_errors, &floats(&case["bse"]), name);
            // statsmodels GLM Poisson with log-effort offset: fit(scale="X2").bse
            close_all(&fit.scaled_std_errors(), &floats(&case["bse_x2"]), name);
            // statsmodels GLM Poisson with log-effort offset: deviance
            close(fit.deviance, case["deviance"].as_f64().unwrap(), name);
            // statsmodels GLM Poisson with log-effort offset: pearson_chi2
            close(
                fit.pearson_chi2,
                case["pearson_chi2"].as_f64().unwrap(),
                name,
            );
            // statsmodels GLM Poisson with log-effort offset: df_resid
            assert_eq!(fit.df_resid as u64, case["df_resid"].as_u64().unwrap());
            assert!(fit.iterations >= 2 && fit.iterations < MAX_ITER);
            for j in 0..x.ncols() {
                close(fit.covariance[(j, j)].sqrt(), fit.std_errors[j], name);
            }
        }
        // The BACI panel is overdispersed by construction.
        let (y, x, offset) = inputs(&cases["baci_full"]);
        assert!(poisson_glm(&y, &x, &offset).unwrap().dispersion() > 1.0);
    }

    #[test]
    fn score_statistic_matches_numpy_formula() {
        let fx = fixture();
        let st = &fx["score_test"];
        let case = &fx["cases"][st["case"].as_str().unwrap()];
        let (y, x, offset) = inputs(case);
        let fit = poisson_glm(&y, &x, &offset).unwrap();
        let test = ScoreTest::new(&y, &x, &fit);
        let extra = floats(&st["extra"]);
        // NumPy, Rao (1948) score formula on the statsmodels reduced fit
        close(
            test.statistic(&extra),
            st["statistic"].as_f64().unwrap(),
            "score",
        );
        // A column already in the design adds nothing.
        let first_site: Vec<f64> = (0..x.nrows()).map(|i| x[(i, 1)]).collect();
        assert!(test.statistic(&first_site).is_nan());
    }

    #[test]
    fn grouped_score_equals_the_expanded_column() {
        // Derived identity: for a column constant within groups, x = A v, the
        // k-dimensional reduction gives the same U and V as the n-row formula.
        let fx = fixture();
        let case = &fx["cases"]["site_year"];
        let (y, x, offset) = inputs(case);
        let year = codes(&case["year"]);
        let reduced = x.columns(0, x.ncols() - 1).into_owned();
        let fit = poisson_glm(&y, &reduced, &offset).unwrap();
        let test = ScoreTest::new(&y, &reduced, &fit);
        let k = year.iter().max().unwrap() + 1;
        let grouped = test.grouped(&year, k);
        for v in [
            (0..k).map(|j| j as f64).collect::<Vec<_>>(),
            (0..k).map(|j| ((j * 7) % k) as f64).collect(),
            (0..k).map(|j| f64::from(u8::from(j >= 4))).collect(),
        ] {
            let expanded: Vec<f64> = year.iter().map(|&c| v[c]).collect();
            close(
                grouped.statistic(&v),
                test.statistic(&expanded),
                "grouped score",
            );
        }
        // A constant lies in the design.
        assert!(grouped.statistic(&vec![2.0; k]).is_nan());
        assert!(grouped.one_step(&vec![2.0; k]).abs() < 1e-15);
    }

    #[test]
    fn pooled_rate_ratio_is_the_one_factor_coefficient() {
        // Derived identity: the one-factor Poisson MLE with a log-effort offset
        // fits each group its pooled rate Σy/Σe.
        let fx = fixture();
        let case = &fx["cases"]["one_factor"];
        let (y, x, offset) = inputs(case);
        let effort = floats(&case["effort"]);
        let rates = pooled_rates(&y, &effort, &codes(&case["codes"]), 2);
        // NumPy Σy/Σe, as recorded beside the statsmodels fit
        close_all(&rates, &floats(&case["pooled_rates"]), "pooled rates");
        let fit = poisson_glm(&y, &x, &offset).unwrap();
        close(fit.coefficients[0].exp(), rates[0], "rate of group 0");
        close(fit.coefficients[1].exp(), rates[1] / rates[0], "rate ratio");
    }

    #[test]
    fn all_zero_levels_are_found() {
        let y = [0.0, 3.0, 0.0, 0.0, 1.0, 0.0, 0.0];
        let levels = [0, 0, 1, 1, 2, 3, 3];
        assert_eq!(all_zero_levels(&y, &levels, 5), vec![1, 3]);
        assert!(all_zero_levels(&[1.0, 2.0], &[0, 1], 2).is_empty());
        // The fixture's rare site has zeros but is not all zero.
        let fx = fixture();
        let case = &fx["cases"]["site_year"];
        assert!(all_zero_levels(&floats(&case["y"]), &codes(&case["codes"]), 5).is_empty());
    }

    #[test]
    fn rank_deficient_design_negative_and_bad_inputs_are_refused() {
        let n = 6;
        let y = [0.0, 2.0, 1.0, 4.0, 0.0, 3.0];
        let offset = [0.0; 6];
        // Column 2 is twice column 1.
        let x = DMatrix::from_fn(n, 3, |i, j| match j {
            0 => 1.0,
            1 => i as f64,
            _ => 2.0 * i as f64,
        });
        match poisson_glm(&y, &x, &offset) {
            Err(AnalysisError::InvalidArgument { name: "x", reason }) => {
                assert!(reason.contains("rank deficient"), "{reason}")
            }
            other => panic!("expected a rank-deficiency refusal, got {other:?}"),
        }
        let x = DMatrix::from_fn(n, 2, |i, j| if j == 0 { 1.0 } else { i as f64 });
        let mut neg = y;
        neg[3] = -1.0;
        assert_eq!(
            poisson_glm(&neg, &x, &offset),
            Err(AnalysisError::Negative { row: 3, col: 0 })
        );
        let mut nan = y;
        nan[1] = f64::NAN;
        assert_eq!(
            poisson_glm(&nan, &x, &offset),
            Err(AnalysisError::NonFinite { row: 1, col: 0 })
        );
        let mut bad_offset = offset;
        bad_offset[5] = f64::INFINITY;
        assert_eq!(
            poisson_glm(&y, &x, &bad_offset),
            Err(AnalysisError::NonFinite { row: 5, col: 0 })
        );
        assert_eq!(
            poisson_glm(&y[..5], &x, &offset),
            Err(AnalysisError::DimensionMismatch {
                expected: 6,
                found: 5
            })
        );
        let square = DMatrix::from_fn(2, 2, |i, j| if j == 0 { 1.0 } else { i as f64 });
        assert_eq!(
            poisson_glm(&y[..2], &square, &offset[..2]),
            Err(AnalysisError::Saturated { rank: 2, n: 2 })
        );
        // Zeros alone are fine.
        assert!(poisson_glm(&y, &x, &offset).is_ok());
    }
}
