//! Correspondence analysis (CA) and canonical correspondence analysis (CCA)
//! of a samples × taxa count matrix.
//!
//! Owns the kernels only: validation, the matrix of standardised residuals,
//! its singular value decomposition, and the coordinates derived from it.
//! PCoA lives in `gower.rs`, permutation tests of the constraints in the
//! permutation module; nothing here reads files, prints or knows the store.
//!
//! Notation (docs/methods.md, "CA and CCA in matrix form"): `P = Y / y_++`, row
//! masses `r = P 1`, column masses `c = P' 1`, `D_r = diag(r)`, `D_c = diag(c)`,
//! and the matrix of standardised residuals `S = D_r^{-1/2} (P - r c') D_c^{-1/2}`
//! with thin SVD `S = U Σ V'`. The principal inertias are `σ_k²`; their sum, the
//! total inertia, equals `χ² / y_++` of the table seen as a contingency table.
//!
//! Sign convention: SVD axes have arbitrary sign. Every axis returned here is
//! flipped so that the entry of largest absolute value in its row (sample)
//! standard coordinates is positive (first such entry on ties), which makes
//! output reproducible across platforms and library versions.

use nalgebra::DMatrix;
use serde::Serialize;

use super::error::AnalysisError;
use super::prec::{EIG_ZERO, RANK_TOL};

/// Result of a correspondence analysis.
///
/// `k` below is the number of axes with non-zero principal inertia
/// (`σ_k² > EIG_ZERO · σ_1²`), at most `min(n, p) - 1`.
#[derive(Debug, Clone)]
pub struct CaResult {
    /// Row masses `r_i = t_i / y_++` (length n).
    pub row_masses: Vec<f64>,
    /// Column masses `c_j = y_+j / y_++` (length p).
    pub col_masses: Vec<f64>,
    /// Grand total `y_++`.
    pub grand_total: f64,
    /// Pearson's χ² of the table (no continuity correction).
    pub chi_square: f64,
    /// Total inertia `Σ σ_k² = χ² / y_++`.
    pub total_inertia: f64,
    /// Principal inertias (eigenvalues) `σ_k²`, largest first (length k).
    pub inertias: Vec<f64>,
    /// Row principal coordinates `F = D_r^{-1/2} U Σ` (n × k). Euclidean
    /// distances between rows of `F` are the chi-square distances between samples.
    pub row_principal: DMatrix<f64>,
    /// Row standard coordinates `Φ = D_r^{-1/2} U` (n × k).
    pub row_standard: DMatrix<f64>,
    /// Column principal coordinates `G = D_c^{-1/2} V Σ` (p × k).
    pub col_principal: DMatrix<f64>,
    /// Column standard coordinates `Γ = D_c^{-1/2} V` (p × k).
    pub col_standard: DMatrix<f64>,
}

impl CaResult {
    /// Share of the total inertia carried by each axis (`σ_k² / Σ σ²`); all
    /// zeros when the total inertia is zero.
    pub fn inertia_shares(&self) -> Vec<f64> {
        shares(&self.inertias, self.total_inertia)
    }
}

/// Leading CA row coordinates and the inertia they carry (see [`ca_axes`]).
#[derive(Debug, Clone)]
pub struct CaAxes {
    /// Number of axes asked for.
    pub requested: usize,
    /// Row principal coordinates on the leading axes (n × m, where
    /// `m = min(requested, number of non-zero axes)`).
    pub coords: DMatrix<f64>,
    /// Principal inertias of those axes (length m).
    pub inertias: Vec<f64>,
    /// Total inertia of the table.
    pub total_inertia: f64,
    /// `Σ inertias / total_inertia` (0 when the total inertia is 0).
    pub share: f64,
}

/// Result of a canonical correspondence analysis.
///
/// `k` is the number of constrained axes with non-zero eigenvalue, at most the
/// rank of the weighted-centred environmental matrix.
#[derive(Debug, Clone)]
pub struct CcaResult {
    /// Row masses `r` (length n).
    pub row_masses: Vec<f64>,
    /// Column masses `c` (length p).
    pub col_masses: Vec<f64>,
    /// Total inertia of the table (`χ² / y_++`), as in CA.
    pub total_inertia: f64,
    /// Constrained inertia `‖Ŝ‖_F²`, the part of `S` fitted by the environment.
    pub constrained_inertia: f64,
    /// Unconstrained (residual) inertia `‖S − Ŝ‖_F²`.
    pub unconstrained_inertia: f64,
    /// Rank of the weighted-centred environmental matrix: the constraint degrees of freedom.
    pub constraint_rank: usize,
    /// Number of samples.
    pub n: usize,
    /// Canonical eigenvalues `σ_ck²` of `Ŝ`, largest first (length k).
    pub constrained_eigenvalues: Vec<f64>,
    /// Eigenvalues of the residual `S − Ŝ` (the unconstrained axes), largest first.
    pub unconstrained_eigenvalues: Vec<f64>,
    /// Site scores as linear combinations of the environment ("LC" scores),
    /// standard scaling `D_r^{-1/2} U_c` (n × k).
    pub site_lc_standard: DMatrix<f64>,
    /// LC site scores in principal scaling `D_r^{-1/2} U_c Σ_c` (n × k).
    pub site_lc_principal: DMatrix<f64>,
    /// Site scores as weighted averages of the species standard scores ("WA"
    /// scores), `D_r^{-1} P D_c^{-1/2} V_c` (n × k).
    pub site_wa: DMatrix<f64>,
    /// Species scores in principal scaling `D_c^{-1/2} V_c Σ_c` (p × k).
    pub species_principal: DMatrix<f64>,
    /// Species scores in standard scaling `D_c^{-1/2} V_c` (p × k).
    pub species_standard: DMatrix<f64>,
}

impl CcaResult {
    /// Constrained share of the total inertia (0 when the total is 0).
    pub fn constrained_share(&self) -> f64 {
        if self.total_inertia > 0.0 {
            self.constrained_inertia / self.total_inertia
        } else {
            0.0
        }
    }

    /// Pseudo-F of the constraints,
    /// `(constrained / rank) / (unconstrained / (n − rank − 1))`, or `None`
    /// when the constraints leave no residual degrees of freedom or explain nothing.
    pub fn pseudo_f(&self) -> Option<f64> {
        let q = self.constraint_rank;
        if q == 0 || self.n <= q + 1 || self.unconstrained_inertia <= 0.0 {
            return None;
        }
        let df_resid = (self.n - q - 1) as f64;
        Some((self.constrained_inertia / q as f64) / (self.unconstrained_inertia / df_resid))
    }
}

/// The pieces shared by CA and CCA.
struct Residuals {
    p: DMatrix<f64>,
    r: Vec<f64>,
    c: Vec<f64>,
    total: f64,
    s: DMatrix<f64>,
}

/// Validate a count matrix and form `P`, `r`, `c` and `S`.
fn residuals(y: &DMatrix<f64>) -> Result<Residuals, AnalysisError> {
    let (n, p) = y.shape();
    if n < 2 {
        return Err(AnalysisError::TooFewSamples { found: n, min: 2 });
    }
    if p < 2 {
        return Err(AnalysisError::InvalidArgument {
            name: "taxa",
            reason: format!("correspondence analysis needs at least 2 taxa, found {p}"),
        });
    }
    for j in 0..p {
        for i in 0..n {
            let v = y[(i, j)];
            if !v.is_finite() {
                return Err(AnalysisError::NonFinite { row: i, col: j });
            }
            if v < 0.0 {
                return Err(AnalysisError::Negative { row: i, col: j });
            }
        }
    }
    let empty_rows: Vec<usize> = (0..n).filter(|&i| y.row(i).sum() <= 0.0).collect();
    if !empty_rows.is_empty() {
        return Err(AnalysisError::EmptySamples { rows: empty_rows });
    }
    let empty_cols: Vec<usize> = (0..p).filter(|&j| y.column(j).sum() <= 0.0).collect();
    if !empty_cols.is_empty() {
        return Err(AnalysisError::EmptyTaxa { cols: empty_cols });
    }
    let total = y.sum();
    let pm = y / total;
    let r: Vec<f64> = (0..n).map(|i| pm.row(i).sum()).collect();
    let c: Vec<f64> = (0..p).map(|j| pm.column(j).sum()).collect();
    let s = DMatrix::from_fn(n, p, |i, j| {
        let e = r[i] * c[j];
        (pm[(i, j)] - e) / e.sqrt()
    });
    Ok(Residuals {
        p: pm,
        r,
        c,
        total,
        s,
    })
}

/// Thin SVD with singular values sorted largest first, truncated to the
/// axes whose squared singular value exceeds `EIG_ZERO · σ_1²`, signs fixed by
/// the largest-|entry| rule on `D_r^{-1/2} U`. Returns `(U, σ, V)`.
fn svd_axes(m: &DMatrix<f64>, r: &[f64]) -> Result<Axes, AnalysisError> {
    let (n, p) = m.shape();
    let (u, sv, v) = checked_svd(m)?;
    let top = sv.iter().cloned().fold(0.0_f64, f64::max);
    let keep: Vec<usize> = (0..sv.len())
        .filter(|&k| top > 0.0 && sv[k] * sv[k] > EIG_ZERO * top * top)
        .collect();
    let mut uk = DMatrix::zeros(n, keep.len());
    let mut vk = DMatrix::zeros(p, keep.len());
    let mut s = Vec::with_capacity(keep.len());
    for (a, &k) in keep.iter().enumerate() {
        // Sign rule on the row standard coordinates D_r^{-1/2} u_k.
        let mut best = 0.0_f64;
        let mut sign = 1.0;
        for i in 0..n {
            let x = u[(i, k)] / r[i].sqrt();
            if x.abs() > best.abs() * (1.0 + 1e-12) {
                best = x;
                sign = if x < 0.0 { -1.0 } else { 1.0 };
            }
        }
        uk.set_column(a, &(u.column(k) * sign));
        vk.set_column(a, &(v.column(k) * sign));
        s.push(sv[k]);
    }
    Ok((uk, s, vk))
}

/// `(U, σ, V)` of a thin SVD.
type Axes = (DMatrix<f64>, Vec<f64>, DMatrix<f64>);

/// Thin SVD `M = U Σ V'` with singular values largest first, verified by
/// reconstruction (`‖M − U Σ V'‖_F <= 1e-9 ‖M‖_F`, else an error).
///
/// Computed by one-sided Jacobi rotations (Hestenes 1958; Demmel & Veselić
/// 1992, SIAM J. Matrix Anal. Appl. 13:1204-1245, for its high relative
/// accuracy) on the orientation with fewer columns. nalgebra 0.35's
/// implicit-shift SVD was found to return singular values wrong in the fifth
/// digit on a rank-deficient 4 × 3 residual matrix of this module (numpy
/// disagreed; see the `small` fixture), a known class of problem
/// (dimforge/nalgebra issue 1172), so it is not used here.
fn checked_svd(m: &DMatrix<f64>) -> Result<Axes, AnalysisError> {
    let (n, p) = m.shape();
    let (u, sv, v) = if p <= n {
        jacobi_svd(m)?
    } else {
        let (v, sv, u) = jacobi_svd(&m.transpose())?;
        (u, sv, v)
    };
    let rebuilt = scale_cols(&u, &sv) * v.transpose();
    if (m - rebuilt).norm() > 1e-9 * m.norm() {
        return Err(AnalysisError::Numerical(
            "singular value decomposition failed its reconstruction check".into(),
        ));
    }
    Ok((u, sv, v))
}

/// One-sided Jacobi SVD of `a` (n × p, p <= n): orthogonalise the columns of
/// `a` by plane rotations accumulated in `V`; then `σ_j = ‖a_j‖` and
/// `u_j = a_j / σ_j` (left as zero when `σ_j = 0`).
fn jacobi_svd(a: &DMatrix<f64>) -> Result<Axes, AnalysisError> {
    let (n, p) = a.shape();
    let mut w = a.clone();
    let mut v = DMatrix::<f64>::identity(p, p);
    let tol = 1e-15;
    let mut converged = false;
    for _sweep in 0..100 {
        let mut rotated = false;
        for j in 0..p {
            for k in (j + 1)..p {
                let alpha = w.column(j).norm_squared();
                let beta = w.column(k).norm_squared();
                let gamma = w.column(j).dot(&w.column(k));
                if gamma == 0.0 || gamma.abs() <= tol * (alpha * beta).sqrt() {
                    continue;
                }
                rotated = true;
                let zeta = (beta - alpha) / (2.0 * gamma);
                let t = zeta.signum() / (zeta.abs() + (1.0 + zeta * zeta).sqrt());
                let c = 1.0 / (1.0 + t * t).sqrt();
                let s = c * t;
                for i in 0..n {
                    let (x, y) = (w[(i, j)], w[(i, k)]);
                    w[(i, j)] = c * x - s * y;
                    w[(i, k)] = s * x + c * y;
                }
                for i in 0..p {
                    let (x, y) = (v[(i, j)], v[(i, k)]);
                    v[(i, j)] = c * x - s * y;
                    v[(i, k)] = s * x + c * y;
                }
            }
        }
        if !rotated {
            converged = true;
            break;
        }
    }
    if !converged {
        return Err(AnalysisError::Numerical(
            "singular value decomposition did not converge".into(),
        ));
    }
    let norms: Vec<f64> = (0..p).map(|j| w.column(j).norm()).collect();
    let mut order: Vec<usize> = (0..p).collect();
    order.sort_by(|&x, &y| norms[y].total_cmp(&norms[x]));
    let mut u = DMatrix::zeros(n, p);
    let mut vs = DMatrix::zeros(p, p);
    let mut sv = Vec::with_capacity(p);
    for (a, &j) in order.iter().enumerate() {
        let s = norms[j];
        if s > 0.0 {
            u.set_column(a, &(w.column(j) / s));
        }
        vs.set_column(a, &v.column(j));
        sv.push(s);
    }
    Ok((u, sv, vs))
}

/// Scale row i of `m` by `w[i]`.
fn scale_rows(m: &DMatrix<f64>, w: &[f64]) -> DMatrix<f64> {
    DMatrix::from_fn(m.nrows(), m.ncols(), |i, j| m[(i, j)] * w[i])
}

/// Scale column k of `m` by `w[k]`.
fn scale_cols(m: &DMatrix<f64>, w: &[f64]) -> DMatrix<f64> {
    DMatrix::from_fn(m.nrows(), m.ncols(), |i, j| m[(i, j)] * w[j])
}

fn shares(values: &[f64], total: f64) -> Vec<f64> {
    values
        .iter()
        .map(|v| if total > 0.0 { v / total } else { 0.0 })
        .collect()
}

fn inv_sqrt(w: &[f64]) -> Vec<f64> {
    w.iter().map(|x| 1.0 / x.sqrt()).collect()
}

/// Correspondence analysis of a samples × taxa count matrix.
///
/// Forms the standardised residuals `S = D_r^{-1/2}(P − r c')D_c^{-1/2}`,
/// takes their thin SVD `S = U Σ V'` (one-sided Jacobi, verified), and returns the principal
/// inertias `σ_k²`, the total inertia `χ²/y_++`, and row and column
/// coordinates in principal and standard scaling (see [`CaResult`]). Axes with
/// zero inertia are dropped; signs follow the module's convention. When every
/// sample has the same profile the total inertia is zero and no axis is returned.
///
/// Reference: Greenacre (2007) *Correspondence Analysis in Practice*, 2nd ed.,
/// Chapman & Hall/CRC (SVD of standardised residuals) [from memory];
/// docs/methods.md, "CA and CCA in matrix form".
///
/// # Errors
/// [`AnalysisError::TooFewSamples`] for fewer than 2 rows,
/// [`AnalysisError::InvalidArgument`] for fewer than 2 columns,
/// [`AnalysisError::NonFinite`] / [`AnalysisError::Negative`] for bad entries,
/// [`AnalysisError::EmptySamples`] / [`AnalysisError::EmptyTaxa`] for all-zero
/// rows or columns (drop them first), [`AnalysisError::Numerical`] if the SVD
/// fails to converge.
///
/// # Examples
/// ```
/// use nalgebra::DMatrix;
/// use tally::analysis::ordination::ca;
/// let y = DMatrix::from_row_slice(3, 3, &[10., 10., 20., 10., 15., 10., 15., 5., 5.]);
/// let res = ca(&y).unwrap();
/// let sum: f64 = res.inertias.iter().sum();
/// assert!((sum - res.total_inertia).abs() < 1e-12);
/// ```
pub fn ca(y: &DMatrix<f64>) -> Result<CaResult, AnalysisError> {
    let Residuals { r, c, total, s, .. } = residuals(y)?;
    let (u, sv, v) = svd_axes(&s, &r)?;
    let total_inertia = s.norm_squared();
    let ir = inv_sqrt(&r);
    let ic = inv_sqrt(&c);
    let row_standard = scale_rows(&u, &ir);
    let col_standard = scale_rows(&v, &ic);
    Ok(CaResult {
        row_principal: scale_cols(&row_standard, &sv),
        col_principal: scale_cols(&col_standard, &sv),
        row_standard,
        col_standard,
        inertias: sv.iter().map(|x| x * x).collect(),
        chi_square: total_inertia * total,
        total_inertia,
        grand_total: total,
        row_masses: r,
        col_masses: c,
    })
}

/// The leading `k` CA row principal coordinates and the share of the total
/// inertia they carry. Used as a reduced shape design when the full profile
/// space would saturate a linear model. If the table has fewer than `k`
/// non-zero axes, all of them are returned (`coords.ncols() < requested`).
///
/// Reference: as [`ca`].
///
/// # Errors
/// As [`ca`]; [`AnalysisError::InvalidArgument`] when `k == 0`.
///
/// # Examples
/// ```
/// use nalgebra::DMatrix;
/// use tally::analysis::ordination::ca_axes;
/// let y = DMatrix::from_row_slice(3, 3, &[10., 10., 20., 10., 15., 10., 15., 5., 5.]);
/// let a = ca_axes(&y, 1).unwrap();
/// assert_eq!(a.coords.ncols(), 1);
/// assert!(a.share > 0.0 && a.share <= 1.0);
/// ```
pub fn ca_axes(y: &DMatrix<f64>, k: usize) -> Result<CaAxes, AnalysisError> {
    if k == 0 {
        return Err(AnalysisError::InvalidArgument {
            name: "k",
            reason: "at least one axis is needed".into(),
        });
    }
    let res = ca(y)?;
    let m = k.min(res.inertias.len());
    let inertias = res.inertias[..m].to_vec();
    let carried: f64 = inertias.iter().sum();
    Ok(CaAxes {
        requested: k,
        coords: res.row_principal.columns(0, m).into_owned(),
        share: if res.total_inertia > 0.0 {
            carried / res.total_inertia
        } else {
            0.0
        },
        inertias,
        total_inertia: res.total_inertia,
    })
}

/// Canonical correspondence analysis of `y` (n × p counts) constrained by the
/// environmental design `z` (n × q: covariates and dummy-coded factors, no
/// intercept column needed; a constant column is absorbed by the centring).
///
/// Method (ter Braak 1986, Ecology 67:1167-1179; weighted-regression route as
/// in Legendre & Legendre 2012, *Numerical Ecology* 3rd ed., ch. 11):
/// 1. `S` as in [`ca`]; `Z_c = Z − 1 (r'Z)` (weighted centring by row masses),
///    each column then divided by its weighted standard deviation
///    (conditioning only: the fit does not change);
/// 2. `Z_w = D_r^{1/2} Z_c`, orthonormal basis `Q` of its column space by SVD
///    (rank: singular values above `RANK_TOL · s_max`);
/// 3. fitted part `Ŝ = Q Q' S`, its SVD `Ŝ = U_c Σ_c V_c'`: canonical
///    eigenvalues `σ_ck²`, constrained inertia `‖Ŝ‖²`, unconstrained `‖S − Ŝ‖²`;
/// 4. scores as documented on [`CcaResult`] (LC and WA site scores are both given).
///
/// # Errors
/// As [`ca`]; [`AnalysisError::DimensionMismatch`] when `z` has a different
/// number of rows; [`AnalysisError::NonFinite`] for bad entries of `z`;
/// [`AnalysisError::EmptyTerm`] when `z` is constant (rank 0 after centring);
/// [`AnalysisError::Saturated`] when the constraints leave no residual degree
/// of freedom (`rank + 1 >= n`).
///
/// # Examples
/// ```
/// use nalgebra::DMatrix;
/// use tally::analysis::ordination::cca;
/// let y = DMatrix::from_row_slice(4, 3, &[10., 2., 1., 8., 4., 2., 3., 6., 5., 1., 7., 9.]);
/// let z = DMatrix::from_column_slice(4, 1, &[1., 2., 3., 4.]);
/// let res = cca(&y, &z).unwrap();
/// let sum = res.constrained_inertia + res.unconstrained_inertia;
/// assert!((sum - res.total_inertia).abs() < 1e-12);
/// ```
pub fn cca(y: &DMatrix<f64>, z: &DMatrix<f64>) -> Result<CcaResult, AnalysisError> {
    let Residuals { p: pm, r, c, s, .. } = residuals(y)?;
    let (n, q) = z.shape();
    if n != y.nrows() {
        return Err(AnalysisError::DimensionMismatch {
            expected: y.nrows(),
            found: n,
        });
    }
    for j in 0..q {
        for i in 0..n {
            if !z[(i, j)].is_finite() {
                return Err(AnalysisError::NonFinite { row: i, col: j });
            }
        }
    }
    // Weighted centring and standardising of Z by the row masses.
    let sr: Vec<f64> = r.iter().map(|x| x.sqrt()).collect();
    let mut zw = DMatrix::zeros(n, q);
    for j in 0..q {
        let mean: f64 = (0..n).map(|i| r[i] * z[(i, j)]).sum();
        let var: f64 = (0..n).map(|i| r[i] * (z[(i, j)] - mean).powi(2)).sum();
        let sd = var.sqrt();
        let scale = if sd > 0.0 { 1.0 / sd } else { 0.0 };
        for i in 0..n {
            zw[(i, j)] = sr[i] * (z[(i, j)] - mean) * scale;
        }
    }
    let basis = orthonormal_basis(&zw)?;
    let rank = basis.ncols();
    if rank == 0 {
        return Err(AnalysisError::EmptyTerm);
    }
    if rank + 1 >= n {
        return Err(AnalysisError::Saturated { rank: rank + 1, n });
    }
    let fitted = &basis * (basis.transpose() * &s);
    let resid = &s - &fitted;
    let (uc, svc, vc) = svd_axes(&fitted, &r)?;
    let (_, svr, _) = svd_axes(&resid, &r)?;
    let ir = inv_sqrt(&r);
    let ic = inv_sqrt(&c);
    let site_lc_standard = scale_rows(&uc, &ir);
    let species_standard = scale_rows(&vc, &ic);
    // WA: D_r^{-1} P Γ_c, weighted averages of the species standard scores.
    let inv_r: Vec<f64> = r.iter().map(|x| 1.0 / x).collect();
    let site_wa = scale_rows(&(&pm * &species_standard), &inv_r);
    let total_inertia = s.norm_squared();
    Ok(CcaResult {
        site_lc_principal: scale_cols(&site_lc_standard, &svc),
        species_principal: scale_cols(&species_standard, &svc),
        site_lc_standard,
        species_standard,
        site_wa,
        constrained_eigenvalues: svc.iter().map(|x| x * x).collect(),
        unconstrained_eigenvalues: svr.iter().map(|x| x * x).collect(),
        constrained_inertia: fitted.norm_squared(),
        unconstrained_inertia: resid.norm_squared(),
        total_inertia,
        constraint_rank: rank,
        n,
        row_masses: r,
        col_masses: c,
    })
}

/// Taxa placed in an ordination ([`taxon_points`], [`weighted_average_points`]).
#[derive(Debug, Clone, PartialEq)]
pub struct TaxonPoints {
    /// One row per taxon, one column per axis.
    pub coords: DMatrix<f64>,
    /// Each taxon's share of the weighted spread of the taxa on these axes
    /// (adds up to 1; all 0 when every point is at the origin).
    pub contribution: Vec<f64>,
}

/// The shares `w_j ‖q_j‖² / Σ_k w_k ‖q_k‖²` of weighted squared distances from the origin.
fn spread_shares(weights: &[f64], q: &DMatrix<f64>) -> Vec<f64> {
    let parts: Vec<f64> = (0..q.nrows())
        .map(|j| weights[j] * q.row(j).norm_squared())
        .collect();
    let total: f64 = parts.iter().sum();
    parts
        .iter()
        .map(|v| if total > 0.0 { v / total } else { 0.0 })
        .collect()
}

/// The taxa of a CA or CCA on its first `k` axes: their standard coordinates
/// Γ (samples in principal CA coordinates, and CCA's WA site scores, are the
/// weighted averages of these, so a sample lies towards the taxa it holds), and
/// each taxon's contribution to the inertia of those axes,
/// `c_j Σ_a λ_a Γ_ja² / Σ_a λ_a` (Greenacre 2007, *Correspondence Analysis in
/// Practice*, 2nd ed., ch. 11: the column contributions to a principal axis are
/// `c_j Γ_ja²` and add up to 1 on each axis).
///
/// # Errors
/// [`AnalysisError::DimensionMismatch`] when the masses, eigenvalues and
/// coordinates disagree.
pub fn taxon_points(
    col_standard: &DMatrix<f64>,
    col_masses: &[f64],
    eigenvalues: &[f64],
    k: usize,
) -> Result<TaxonPoints, AnalysisError> {
    if col_masses.len() != col_standard.nrows() {
        return Err(AnalysisError::DimensionMismatch {
            expected: col_standard.nrows(),
            found: col_masses.len(),
        });
    }
    let k = k.min(col_standard.ncols()).min(eigenvalues.len());
    let coords = col_standard.columns(0, k).into_owned();
    let principal = scale_cols(
        &coords,
        &eigenvalues[..k]
            .iter()
            .map(|v| v.max(0.0).sqrt())
            .collect::<Vec<_>>(),
    );
    Ok(TaxonPoints {
        contribution: spread_shares(col_masses, &principal),
        coords,
    })
}

/// The taxa of an ordination of samples that has no taxon scores of its own
/// (PCoA): each taxon at the weighted average of the sample coordinates
/// `x`, weighted by its values in `y` (n × p), `s_ja = Σ_i y_ij x_ia / Σ_i y_ij`,
/// a projection after the fact (Legendre & Legendre 2012, *Numerical Ecology*
/// 3rd ed., section 9.2: species projected onto a PCoA as weighted averages);
/// contributions are `w_j ‖s_j‖²` normalised, with `w_j = y_+j / y_++`. Taxa
/// with no organisms get the origin and no contribution.
///
/// # Errors
/// [`AnalysisError::DimensionMismatch`] when `y` and `x` differ in rows;
/// [`AnalysisError::NonFinite`] or [`AnalysisError::Negative`] for bad values.
pub fn weighted_average_points(
    y: &DMatrix<f64>,
    x: &DMatrix<f64>,
) -> Result<TaxonPoints, AnalysisError> {
    let (n, p) = y.shape();
    if x.nrows() != n {
        return Err(AnalysisError::DimensionMismatch {
            expected: n,
            found: x.nrows(),
        });
    }
    for i in 0..n {
        for j in 0..p {
            let v = y[(i, j)];
            if !v.is_finite() {
                return Err(AnalysisError::NonFinite { row: i, col: j });
            }
            if v < 0.0 {
                return Err(AnalysisError::Negative { row: i, col: j });
            }
        }
    }
    let col_totals: Vec<f64> = (0..p).map(|j| y.column(j).sum()).collect();
    let grand: f64 = col_totals.iter().sum();
    let k = x.ncols();
    let coords = DMatrix::from_fn(p, k, |j, a| {
        if col_totals[j] > 0.0 {
            (0..n).map(|i| y[(i, j)] * x[(i, a)]).sum::<f64>() / col_totals[j]
        } else {
            0.0
        }
    });
    let weights: Vec<f64> = col_totals
        .iter()
        .map(|t| if grand > 0.0 { t / grand } else { 0.0 })
        .collect();
    Ok(TaxonPoints {
        contribution: spread_shares(&weights, &coords),
        coords,
    })
}

/// Orthonormal basis of the column space of `m` (rank-revealing SVD).
fn orthonormal_basis(m: &DMatrix<f64>) -> Result<DMatrix<f64>, AnalysisError> {
    if m.ncols() == 0 {
        return Ok(DMatrix::zeros(m.nrows(), 0));
    }
    let (u, sv, _) = checked_svd(m)?;
    let top = sv.iter().cloned().fold(0.0_f64, f64::max);
    let keep: Vec<usize> = (0..sv.len())
        .filter(|&k| top > 0.0 && sv[k] > RANK_TOL * top)
        .collect();
    let mut out = DMatrix::zeros(m.nrows(), keep.len());
    for (a, &k) in keep.iter().enumerate() {
        out.set_column(a, &u.column(k));
    }
    Ok(out)
}

/// Serializable summary of inertias (for JSON output by callers).
#[derive(Debug, Clone, Serialize)]
pub struct InertiaSummary {
    /// Total inertia.
    pub total: f64,
    /// Inertia per axis, largest first.
    pub axes: Vec<f64>,
    /// Share of the total per axis.
    pub shares: Vec<f64>,
}

impl From<&CaResult> for InertiaSummary {
    fn from(r: &CaResult) -> Self {
        InertiaSummary {
            total: r.total_inertia,
            axes: r.inertias.clone(),
            shares: r.inertia_shares(),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;
    use serde_json::Value;

    const FIXTURE: &str = include_str!("../../tests/reference/ordination.json");

    fn fixture() -> Value {
        serde_json::from_str(FIXTURE).expect("invariant: committed fixture is valid JSON")
    }

    fn matrix(v: &Value) -> DMatrix<f64> {
        let rows: Vec<Vec<f64>> = serde_json::from_value(v.clone()).expect("matrix rows");
        DMatrix::from_fn(rows.len(), rows[0].len(), |i, j| rows[i][j])
    }

    fn floats(v: &Value) -> Vec<f64> {
        serde_json::from_value(v.clone()).expect("float list")
    }

    /// Toy community (docs/methods.md, "The toy community").
    fn toy() -> DMatrix<f64> {
        DMatrix::from_row_slice(
            10,
            6,
            &[
                12., 5., 0., 3., 1., 0., 20., 8., 1., 5., 0., 2., 9., 4., 0., 1., 2., 0., 15., 6.,
                2., 4., 1., 1., 30., 12., 1., 7., 3., 0., 3., 2., 8., 1., 9., 4., 1., 4., 12., 0.,
                6., 7., 5., 1., 6., 2., 11., 3., 2., 3., 15., 1., 8., 9., 0., 2., 5., 0., 4., 2.,
            ],
        )
    }

    #[test]
    fn ca_toy_matches_the_worked_example() {
        let res = ca(&toy()).unwrap();
        // docs/methods.md, "The toy community": CA principal inertias (6 decimals),
        // computed with NumPy (no publication); to full precision the same values are
        // the numpy SVD of tests/reference/ordination.json, checked in the next test.
        let expected = [0.537521, 0.050774, 0.008811, 0.002318, 0.000407];
        assert_eq!(res.inertias.len(), 5);
        for (a, e) in res.inertias.iter().zip(expected) {
            assert!((a - e).abs() < 5e-7, "{a} vs {e}");
        }
        // Total inertia 0.5998306 = chi^2/N (scipy.stats.chi2_contingency in the fixture).
        assert!((res.total_inertia - 0.5998306).abs() < 5e-8);
        let sum: f64 = res.inertias.iter().sum();
        assert_relative_eq!(sum, res.total_inertia, max_relative = 1e-12);
    }

    #[test]
    fn ca_matches_scipy_chi2_and_numpy_svd() {
        let fx = fixture();
        for key in ["toy", "random", "small"] {
            let t = &fx[key];
            let res = ca(&matrix(&t["y"])).unwrap();
            // scipy.stats.chi2_contingency(Y, correction=False): chi^2 and chi^2/N.
            let chi2 = t["chi_square"].as_f64().unwrap();
            let total = t["total_inertia_chi2_contingency"].as_f64().unwrap();
            assert_relative_eq!(res.chi_square, chi2, max_relative = 1e-9);
            assert_relative_eq!(res.total_inertia, total, max_relative = 1e-9);
            // numpy.linalg.svd of the standardised residuals: squared singular values.
            let ev = floats(&t["ca_inertias_numpy_svd"]);
            assert_eq!(res.inertias.len(), ev.len(), "{key}");
            for (a, e) in res.inertias.iter().zip(&ev) {
                assert_relative_eq!(*a, *e, max_relative = 1e-9);
            }
        }
    }

    #[test]
    fn row_principal_distances_are_chi_square_distances() {
        // docs/methods.md, "CA and CCA in matrix form": Euclidean distances between CA
        // principal row coordinates equal chi-square distances
        // sqrt(sum_j (a_ij - a_kj)^2 / c_j).
        let y = toy();
        let res = ca(&y).unwrap();
        let n = y.nrows();
        for i in 0..n {
            for k in (i + 1)..n {
                let ti = y.row(i).sum();
                let tk = y.row(k).sum();
                let direct: f64 = (0..y.ncols())
                    .map(|j| (y[(i, j)] / ti - y[(k, j)] / tk).powi(2) / res.col_masses[j])
                    .sum::<f64>()
                    .sqrt();
                let coord = (res.row_principal.row(i) - res.row_principal.row(k)).norm();
                assert_relative_eq!(coord, direct, max_relative = 1e-10);
            }
        }
    }

    #[test]
    fn transition_formula_and_sign_convention() {
        // Greenacre (2007), transition formula (value from memory): F = D_r^{-1} P Γ,
        // rows are weighted averages of the column standard coordinates.
        let y = toy();
        let res = ca(&y).unwrap();
        let p = &y / y.sum();
        for i in 0..y.nrows() {
            for k in 0..res.inertias.len() {
                let wa: f64 = (0..y.ncols())
                    .map(|j| p[(i, j)] * res.col_standard[(j, k)])
                    .sum::<f64>()
                    / res.row_masses[i];
                assert_relative_eq!(wa, res.row_principal[(i, k)], epsilon = 1e-12);
            }
        }
        // Standard coordinates have unit weighted variance: sum_i r_i phi_ik^2 = 1.
        for k in 0..res.inertias.len() {
            let v: f64 = (0..y.nrows())
                .map(|i| res.row_masses[i] * res.row_standard[(i, k)].powi(2))
                .sum();
            assert_relative_eq!(v, 1.0, epsilon = 1e-12);
            // Sign rule of this module: the largest |entry| of each axis is positive.
            let col = res.row_standard.column(k);
            let big = col
                .iter()
                .cloned()
                .fold(0.0_f64, |m, x| if x.abs() > m.abs() { x } else { m });
            assert!(big > 0.0);
        }
    }

    #[test]
    fn ca_refuses_bad_tables() {
        let mut y = toy();
        y[(2, 0)] = -1.0;
        assert_eq!(
            ca(&y).unwrap_err(),
            AnalysisError::Negative { row: 2, col: 0 }
        );
        y[(2, 0)] = f64::NAN;
        assert_eq!(
            ca(&y).unwrap_err(),
            AnalysisError::NonFinite { row: 2, col: 0 }
        );
        let mut y = toy();
        y.row_mut(3).fill(0.0);
        assert_eq!(
            ca(&y).unwrap_err(),
            AnalysisError::EmptySamples { rows: vec![3] }
        );
        let mut y = toy();
        y.column_mut(4).fill(0.0);
        assert_eq!(
            ca(&y).unwrap_err(),
            AnalysisError::EmptyTaxa { cols: vec![4] }
        );
        let one = DMatrix::from_row_slice(1, 3, &[1., 2., 3.]);
        assert_eq!(
            ca(&one).unwrap_err(),
            AnalysisError::TooFewSamples { found: 1, min: 2 }
        );
    }

    #[test]
    fn identical_profiles_have_no_axes() {
        // Proportional rows: independence holds exactly, chi^2 = 0 (common practice, no source).
        let y = DMatrix::from_row_slice(3, 3, &[1., 2., 3., 2., 4., 6., 3., 6., 9.]);
        let res = ca(&y).unwrap();
        assert!(res.total_inertia < 1e-25);
        assert!(res.inertias.is_empty());
        assert_eq!(res.row_principal.ncols(), 0);
    }

    #[test]
    fn ca_axes_share_and_clamping() {
        let y = toy();
        let full = ca(&y).unwrap();
        let a = ca_axes(&y, 2).unwrap();
        assert_eq!(a.coords.shape(), (10, 2));
        assert_relative_eq!(
            a.share,
            (full.inertias[0] + full.inertias[1]) / full.total_inertia,
            max_relative = 1e-12
        );
        let all = ca_axes(&y, 50).unwrap();
        assert_eq!(all.coords.ncols(), 5);
        assert_eq!(all.requested, 50);
        assert_relative_eq!(all.share, 1.0, max_relative = 1e-12);
        assert!(matches!(
            ca_axes(&y, 0),
            Err(AnalysisError::InvalidArgument { .. })
        ));
    }

    #[test]
    fn cca_toy_log_total_matches_the_worked_example() {
        let y = toy();
        let z = DMatrix::from_fn(10, 1, |i, _| y.row(i).sum().ln());
        let res = cca(&y, &z).unwrap();
        // docs/methods.md, "The toy community": CCA with E = ln(t), constrained inertia
        // 0.0352998 (NumPy weighted least squares, also in tests/reference/ordination.json).
        assert!((res.constrained_inertia - 0.0352998).abs() < 5e-8);
        assert_eq!(res.constraint_rank, 1);
        assert_eq!(res.constrained_eigenvalues.len(), 1);
        assert_relative_eq!(
            res.constrained_inertia + res.unconstrained_inertia,
            res.total_inertia,
            max_relative = 1e-12
        );
        let unc: f64 = res.unconstrained_eigenvalues.iter().sum();
        assert_relative_eq!(unc, res.unconstrained_inertia, max_relative = 1e-10);
    }

    #[test]
    fn cca_matches_numpy_weighted_least_squares() {
        let fx = fixture();
        for key in ["toy", "random", "small"] {
            let t = &fx[key];
            let res = cca(&matrix(&t["y"]), &matrix(&t["z"])).unwrap();
            // numpy.linalg.lstsq of S on the weighted-centred Z, then numpy.linalg.svd.
            let con = t["cca_constrained_inertia"].as_f64().unwrap();
            let unc = t["cca_unconstrained_inertia"].as_f64().unwrap();
            assert_relative_eq!(res.constrained_inertia, con, max_relative = 1e-9);
            assert_relative_eq!(res.unconstrained_inertia, unc, max_relative = 1e-9);
            let ev = floats(&t["cca_eigenvalues"]);
            assert_eq!(res.constrained_eigenvalues.len(), ev.len(), "{key}");
            for (a, e) in res.constrained_eigenvalues.iter().zip(&ev) {
                assert_relative_eq!(*a, *e, max_relative = 1e-9);
            }
            let uev = floats(&t["cca_unconstrained_eigenvalues"]);
            assert_eq!(res.unconstrained_eigenvalues.len(), uev.len(), "{key}");
            for (a, e) in res.unconstrained_eigenvalues.iter().zip(&uev) {
                assert_relative_eq!(*a, *e, max_relative = 1e-9);
            }
        }
    }

    #[test]
    fn cca_lc_scores_are_linear_in_the_environment() {
        // ter Braak (1986): LC site scores are linear combinations of the
        // environmental variables, so regressing them on [1, Z] leaves no residual.
        let fx = fixture();
        let y = matrix(&fx["random"]["y"]);
        let z = matrix(&fx["random"]["z"]);
        let res = cca(&y, &z).unwrap();
        let n = y.nrows();
        let x = DMatrix::from_fn(
            n,
            z.ncols() + 1,
            |i, j| if j == 0 { 1.0 } else { z[(i, j - 1)] },
        );
        let basis = orthonormal_basis(&x).unwrap();
        for k in 0..res.constrained_eigenvalues.len() {
            let lc = res.site_lc_standard.column(k).into_owned();
            let fit = &basis * (basis.transpose() * &lc);
            assert!((lc - fit).norm() < 1e-9);
        }
        // WA scores are weighted averages of species standard scores, and differ from LC.
        let wa = &res.site_wa;
        assert!((wa - &res.site_lc_principal).norm() > 1e-6);
    }

    #[test]
    fn cca_errors() {
        let y = toy();
        let constant = DMatrix::from_element(10, 1, 3.0);
        assert_eq!(cca(&y, &constant).unwrap_err(), AnalysisError::EmptyTerm);
        let short = DMatrix::from_element(9, 1, 3.0);
        assert_eq!(
            cca(&y, &short).unwrap_err(),
            AnalysisError::DimensionMismatch {
                expected: 10,
                found: 9
            }
        );
        // One indicator per sample but the last: rank 9 after centring, no residual df.
        let dummies = DMatrix::from_fn(10, 9, |i, j| if i == j { 1.0 } else { 0.0 });
        assert_eq!(
            cca(&y, &dummies).unwrap_err(),
            AnalysisError::Saturated { rank: 10, n: 10 }
        );
        let mut bad = DMatrix::from_element(10, 1, 1.0);
        bad[(4, 0)] = f64::INFINITY;
        assert_eq!(
            cca(&y, &bad).unwrap_err(),
            AnalysisError::NonFinite { row: 4, col: 0 }
        );
    }

    #[test]
    fn cca_pseudo_f_formula() {
        let y = toy();
        let z = DMatrix::from_fn(10, 1, |i, _| y.row(i).sum().ln());
        let res = cca(&y, &z).unwrap();
        let f = res.pseudo_f().unwrap();
        // docs/methods.md, "CA and CCA in matrix form":
        // F = (constrained/q) / (residual/(n - q - 1)), here with the numpy
        // least-squares inertias of the fixture, q = 1 and n = 10.
        let t = &fixture()["toy"];
        let con = t["cca_constrained_inertia"].as_f64().unwrap();
        let unc = t["cca_unconstrained_inertia"].as_f64().unwrap();
        let by_hand = (con / 1.0) / (unc / 8.0);
        assert_relative_eq!(f, by_hand, max_relative = 1e-8);
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(64))]
        #[test]
        fn ca_inertias_sum_to_total_on_random_tables(
            n in 2usize..12,
            p in 2usize..12,
            seed in proptest::prelude::any::<u64>(),
        ) {
            // Identity: sum of squared singular values = ||S||_F^2 = chi^2 / N
            // (docs/methods.md, "CA and CCA in matrix form"), for tall and wide tables alike.
            proptest::prop_assert!(inertias_sum_to_total(n, p, seed));
        }
    }

    /// The CA identity on an `n × p` table of xorshift counts 1..9 from `seed`:
    /// the reported inertias sum to the total, up to rounding and the axes below
    /// `EIG_ZERO · σ₁²` that CA reports as zero (at most min(n, p) of them).
    fn inertias_sum_to_total(n: usize, p: usize, seed: u64) -> bool {
        let mut state = seed | 1;
        let y = DMatrix::from_fn(n, p, |_, _| {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            ((state % 9) + 1) as f64
        });
        let res = ca(&y).unwrap();
        let sum: f64 = res.inertias.iter().sum();
        let dropped = n.min(p) as f64 * EIG_ZERO * res.inertias.first().copied().unwrap_or(0.0);
        (sum - res.total_inertia).abs() <= 1e-12 * res.total_inertia.max(1e-300) + dropped
            && res.inertias.len() < n.min(p)
            && res.inertias.windows(2).all(|w| w[0] >= w[1])
    }

    #[test]
    fn a_table_with_a_near_zero_axis_keeps_the_identity() {
        // Found by the property above: a 6 × 6 table whose last axis lies below
        // the zero threshold, so the reported inertias miss it.
        assert!(inertias_sum_to_total(6, 6, 870190971328832616));
    }

    /// `a` equals `b` column by column up to a sign per column.
    fn same_up_to_sign(a: &DMatrix<f64>, b: &DMatrix<f64>, tol: f64) {
        assert_eq!(a.shape(), b.shape());
        for c in 0..a.ncols() {
            let sign = if a.column(c).dot(&b.column(c)) < 0.0 {
                -1.0
            } else {
                1.0
            };
            for r in 0..a.nrows() {
                assert!(
                    (a[(r, c)] - sign * b[(r, c)]).abs() < tol,
                    "({r}, {c}): {} vs {}",
                    a[(r, c)],
                    b[(r, c)]
                );
            }
        }
    }

    #[test]
    fn taxon_scores_equal_the_numpy_solutions() {
        // tests/reference/ordination.json, "toy_taxa": numpy SVD of the standardised
        // residuals (CA), numpy lstsq + SVD of the fitted part (CCA on log totals),
        // numpy eigh of the Gower-centred Bray-Curtis matrix (scipy pdist) for PCoA.
        let fx = fixture();
        let t = &fx["toy_taxa"];
        let y = toy();
        let r = ca(&y).unwrap();
        let pts = taxon_points(&r.col_standard, &r.col_masses, &r.inertias, 2).unwrap();
        same_up_to_sign(&pts.coords, &matrix(&t["ca_col_standard_2"]), 1e-9);
        for (a, b) in pts.contribution.iter().zip(floats(&t["ca_col_share_2"])) {
            assert!((a - b).abs() < 1e-12, "{a} vs {b}");
        }
        assert_relative_eq!(
            pts.contribution.iter().sum::<f64>(),
            1.0,
            max_relative = 1e-12
        );
        // Samples in principal coordinates are the weighted averages of the
        // taxa's standard coordinates (the transition formula).
        let wa = weighted_average_points(&y.transpose(), &pts.coords).unwrap();
        same_up_to_sign(
            &wa.coords,
            &r.row_principal.columns(0, 2).into_owned(),
            1e-9,
        );

        let z = DMatrix::from_fn(10, 1, |i, _| y.row(i).sum().ln());
        let c = cca(&y, &z).unwrap();
        let pts = taxon_points(
            &c.species_standard,
            &c.col_masses,
            &c.constrained_eigenvalues,
            2,
        )
        .unwrap();
        same_up_to_sign(&pts.coords, &matrix(&t["cca_species_standard"]), 1e-9);
        for (a, b) in pts.contribution.iter().zip(floats(&t["cca_species_share"])) {
            assert!((a - b).abs() < 1e-12, "{a} vs {b}");
        }

        let d = crate::analysis::dissimilarity::Distance::BrayCurtis
            .compute(&y)
            .unwrap();
        let p = crate::analysis::gower::pcoa(&d).unwrap();
        let x = p.coordinates.columns(0, 2).into_owned();
        same_up_to_sign(&x, &matrix(&t["pcoa_bray_curtis_coords_2"]), 1e-9);
        let wa = weighted_average_points(&y, &x).unwrap();
        same_up_to_sign(&wa.coords, &matrix(&t["pcoa_weighted_averages_2"]), 1e-9);
        for (a, b) in wa
            .contribution
            .iter()
            .zip(floats(&t["pcoa_weighted_average_share_2"]))
        {
            assert!((a - b).abs() < 1e-12, "{a} vs {b}");
        }
    }
}
