//! Distance-based linear models (db-RDA route, McArdle & Anderson 2001, Ecology
//! 82:290-297): designs from factors and covariates, orthonormal bases with rank
//! detection, and sums of squares as traces of the Gower-centred matrix G.
//!
//! Owns: [`Grouping`], [`TermSpec`], [`Design`], [`Basis`], [`fit`], [`anova_table`].
//! Never forms the n × n hat matrix: `tr(H G) = Σ_c q_c' G q_c` over an orthonormal
//! basis Q of the design (McArdle & Anderson 2001, Ecology 82:290-297;
//! docs/methods.md, "Distance-based linear models"). Every basis contains the intercept.

use std::collections::BTreeMap;

use nalgebra::DMatrix;
use serde::Serialize;

use super::{AnalysisError, prec};

/// A one-way classification of samples: integer codes 0..a-1 and the level names.
/// Levels are sorted; code 0 is the first level (the reference in treatment coding).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Grouping {
    codes: Vec<usize>,
    levels: Vec<String>,
}

impl Grouping {
    /// Group samples by label; levels are sorted lexicographically.
    pub fn from_labels<S: AsRef<str>>(labels: &[S]) -> Self {
        let mut map: BTreeMap<&str, usize> = BTreeMap::new();
        for l in labels {
            map.insert(l.as_ref(), 0);
        }
        for (i, v) in map.values_mut().enumerate() {
            *v = i;
        }
        let codes = labels.iter().map(|l| map[l.as_ref()]).collect();
        let levels = map.keys().map(|s| s.to_string()).collect();
        Grouping { codes, levels }
    }

    /// Group samples by arbitrary integer codes; levels are the sorted distinct codes
    /// (named by their decimal value) and are renumbered 0..a-1.
    pub fn from_codes(codes: &[usize]) -> Self {
        let mut distinct: Vec<usize> = codes.to_vec();
        distinct.sort_unstable();
        distinct.dedup();
        let codes = codes
            .iter()
            .map(|c| {
                distinct
                    .binary_search(c)
                    .expect("invariant: c is one of the distinct codes")
            })
            .collect();
        Grouping {
            codes,
            levels: distinct.iter().map(|c| c.to_string()).collect(),
        }
    }

    /// Number of samples.
    pub fn n(&self) -> usize {
        self.codes.len()
    }

    /// Number of groups (levels present).
    pub fn n_groups(&self) -> usize {
        self.levels.len()
    }

    /// Group code of each sample.
    pub fn codes(&self) -> &[usize] {
        &self.codes
    }

    /// Level names, in code order.
    pub fn levels(&self) -> &[String] {
        &self.levels
    }

    /// Number of samples in each group.
    pub fn sizes(&self) -> Vec<usize> {
        let mut s = vec![0; self.levels.len()];
        for &c in &self.codes {
            s[c] += 1;
        }
        s
    }

    /// The samples of group `g`, ascending.
    pub fn members(&self, g: usize) -> Vec<usize> {
        (0..self.codes.len())
            .filter(|&i| self.codes[i] == g)
            .collect()
    }

    /// The grouping restricted to samples `idx` (in that order), levels renumbered.
    pub fn subset(&self, idx: &[usize]) -> Grouping {
        let labels: Vec<&str> = idx
            .iter()
            .map(|&i| self.levels[self.codes[i]].as_str())
            .collect();
        Grouping::from_labels(&labels)
    }

    /// Treatment-coded indicator columns for levels 1..a-1 (level 0 is the reference).
    pub fn treatment_columns(&self) -> DMatrix<f64> {
        let a = self.levels.len();
        let mut x = DMatrix::zeros(self.codes.len(), a.saturating_sub(1));
        for (i, &c) in self.codes.iter().enumerate() {
            if c > 0 {
                x[(i, c - 1)] = 1.0;
            }
        }
        x
    }
}

/// What one model term is made of.
#[derive(Debug, Clone, PartialEq)]
pub enum TermSpec {
    /// A factor, treatment coded (first level is the reference).
    Factor(Grouping),
    /// One continuous covariate.
    Covariate(Vec<f64>),
    /// Arbitrary columns (e.g. profiles, interaction products), samples in rows.
    Matrix(DMatrix<f64>),
}

impl TermSpec {
    /// Number of samples the term describes.
    pub fn n(&self) -> usize {
        match self {
            TermSpec::Factor(g) => g.n(),
            TermSpec::Covariate(v) => v.len(),
            TermSpec::Matrix(m) => m.nrows(),
        }
    }

    /// The design columns of the term.
    pub fn columns(&self) -> DMatrix<f64> {
        match self {
            TermSpec::Factor(g) => g.treatment_columns(),
            TermSpec::Covariate(v) => DMatrix::from_column_slice(v.len(), 1, v),
            TermSpec::Matrix(m) => m.clone(),
        }
    }

    /// The interaction of two terms: all products of their columns.
    pub fn interaction(a: &TermSpec, b: &TermSpec) -> TermSpec {
        let (xa, xb) = (a.columns(), b.columns());
        let n = xa.nrows().min(xb.nrows());
        let mut x = DMatrix::zeros(n, xa.ncols() * xb.ncols());
        for i in 0..xa.ncols() {
            for j in 0..xb.ncols() {
                for r in 0..n {
                    x[(r, i * xb.ncols() + j)] = xa[(r, i)] * xb[(r, j)];
                }
            }
        }
        TermSpec::Matrix(x)
    }
}

/// A named model term.
#[derive(Debug, Clone, PartialEq)]
pub struct Term {
    /// Name shown in results.
    pub name: String,
    /// Its columns.
    pub spec: TermSpec,
}

impl Term {
    /// A named term.
    pub fn new(name: impl Into<String>, spec: TermSpec) -> Self {
        Term {
            name: name.into(),
            spec,
        }
    }
}

/// A model design: an ordered list of named terms (the intercept is implicit).
#[derive(Debug, Clone, PartialEq)]
pub struct Design {
    n: usize,
    names: Vec<String>,
    columns: Vec<DMatrix<f64>>,
    factors: Vec<Option<Grouping>>,
}

impl Design {
    /// Build a design for `n` samples.
    ///
    /// # Errors
    /// [`AnalysisError::DimensionMismatch`] when a term has another number of rows;
    /// [`AnalysisError::NonFinite`] for NaN/inf entries (row, term index).
    pub fn new(n: usize, terms: Vec<Term>) -> Result<Self, AnalysisError> {
        let mut names = Vec::with_capacity(terms.len());
        let mut columns = Vec::with_capacity(terms.len());
        let mut factors = Vec::with_capacity(terms.len());
        for (t, term) in terms.into_iter().enumerate() {
            if term.spec.n() != n {
                return Err(AnalysisError::DimensionMismatch {
                    expected: n,
                    found: term.spec.n(),
                });
            }
            let x = term.spec.columns();
            if let Some(pos) = x.iter().position(|v| !v.is_finite()) {
                return Err(AnalysisError::NonFinite {
                    row: pos % n.max(1),
                    col: t,
                });
            }
            names.push(term.name);
            columns.push(x);
            factors.push(match term.spec {
                TermSpec::Factor(g) => Some(g),
                _ => None,
            });
        }
        Ok(Design {
            n,
            names,
            columns,
            factors,
        })
    }

    /// Number of samples.
    pub fn n(&self) -> usize {
        self.n
    }

    /// Term names in order.
    pub fn names(&self) -> &[String] {
        &self.names
    }

    /// The grouping of term `t` when it is a factor.
    pub fn factor(&self, t: usize) -> Option<&Grouping> {
        self.factors[t].as_ref()
    }

    /// Columns of term `t`.
    pub fn columns(&self, t: usize) -> &DMatrix<f64> {
        &self.columns[t]
    }

    /// Orthonormal basis of `[1, X_t for t in terms]`, built in the order given.
    ///
    /// # Errors
    /// As [`Basis::extended`].
    pub fn basis(&self, terms: &[usize]) -> Result<Basis, AnalysisError> {
        let mut b = Basis::intercept(self.n);
        for &t in terms {
            b = b.extended(&self.columns[t])?;
        }
        Ok(b)
    }
}

/// An orthonormal basis (n × k, k = rank) of a design's column space, always
/// containing the intercept direction `1/√n`.
#[derive(Debug, Clone, PartialEq)]
pub struct Basis {
    q: DMatrix<f64>,
}

impl Basis {
    /// The intercept-only basis.
    pub fn intercept(n: usize) -> Self {
        let v = if n == 0 { 0.0 } else { 1.0 / (n as f64).sqrt() };
        Basis {
            q: DMatrix::from_element(n, if n == 0 { 0 } else { 1 }, v),
        }
    }

    /// The basis of `[self, X]`: the columns of `self` followed by new orthonormal
    /// columns spanning what `X` adds. Rank detection: columns of X are scaled to unit
    /// length and projected off the current basis (twice, for stability); a
    /// column-pivoted Gram-Schmidt of the remainders then accepts a direction while
    /// its remaining norm exceeds `prec::RANK_TOL × s_max(X scaled)`, so profiles,
    /// which sum to the intercept, add one dimension fewer than their columns
    /// (docs/methods.md, "Distance-based linear models").
    ///
    /// # Errors
    /// [`AnalysisError::DimensionMismatch`] when X has another number of rows;
    /// [`AnalysisError::Numerical`] if the SVD fails.
    pub fn extended(&self, x: &DMatrix<f64>) -> Result<Basis, AnalysisError> {
        let n = self.q.nrows();
        if x.nrows() != n {
            return Err(AnalysisError::DimensionMismatch {
                expected: n,
                found: x.nrows(),
            });
        }
        let mut cols = Vec::new();
        for c in 0..x.ncols() {
            let norm = x.column(c).norm();
            if norm > 0.0 && norm.is_finite() {
                cols.push(x.column(c) / norm);
            }
        }
        if cols.is_empty() {
            return Ok(self.clone());
        }
        let xs = DMatrix::from_columns(&cols);
        let s_max = xs.singular_values().max();
        // Remainders of the scaled columns off the current basis; then a
        // column-pivoted Gram-Schmidt (largest remaining norm first, every
        // projection done twice): a direction counts while its remaining norm
        // exceeds RANK_TOL × s_max. (An SVD of the remainder was used before; on
        // rank-deficient remainders its left singular vectors were not always
        // orthogonal to the current basis.)
        let mut rest: Vec<nalgebra::DVector<f64>> = cols
            .into_iter()
            .map(|mut c| {
                for _ in 0..2 {
                    let coef = self.q.transpose() * &c;
                    c -= &self.q * coef;
                }
                c
            })
            .collect();
        let mut new_cols: Vec<_> = self.q.column_iter().map(|c| c.into_owned()).collect();
        let tol = prec::RANK_TOL * s_max;
        while !rest.is_empty() {
            let (k, norm) =
                rest.iter()
                    .enumerate()
                    .map(|(k, c)| (k, c.norm()))
                    .fold(
                        (0, -1.0),
                        |best, cur| if cur.1 > best.1 { cur } else { best },
                    );
            if norm.is_nan() || norm <= tol {
                break;
            }
            let mut u = rest.swap_remove(k);
            // Re-orthogonalise against everything accepted so far, then normalise.
            for _ in 0..2 {
                for q in &new_cols {
                    let d = q.dot(&u);
                    u -= q * d;
                }
            }
            let un = u.norm();
            if un.is_nan() || un <= tol {
                continue;
            }
            u /= un;
            for c in rest.iter_mut() {
                for _ in 0..2 {
                    let d = u.dot(c);
                    *c -= &u * d;
                }
            }
            new_cols.push(u);
        }
        Ok(Basis {
            q: DMatrix::from_columns(&new_cols),
        })
    }

    /// Rank (number of columns, intercept included).
    pub fn rank(&self) -> usize {
        self.q.ncols()
    }

    /// Number of samples.
    pub fn n(&self) -> usize {
        self.q.nrows()
    }

    /// The orthonormal columns.
    pub fn q(&self) -> &DMatrix<f64> {
        &self.q
    }

    /// `tr(H G) = Σ_c q_c' G q_c`, O(n² k).
    pub fn trace_hg(&self, g: &DMatrix<f64>) -> f64 {
        let gq = g * &self.q;
        gq.component_mul(&self.q).sum()
    }
}

/// The test of a full model against a reduced (nested) one.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Fit {
    /// Degrees of freedom added by the full model (`k_f - k_r`).
    pub df_term: usize,
    /// `tr((H_f - H_r) G)`.
    pub ss_term: f64,
    /// Residual degrees of freedom of the full model (`n - k_f`).
    pub df_resid: usize,
    /// `tr((I - H_f) G)`.
    pub ss_resid: f64,
    /// `tr(G)`.
    pub ss_total: f64,
    /// Semi-partial R²: `ss_term / ss_total`.
    pub r2_term: f64,
    /// R² of the full model: `tr(H_f G)/tr(G)` (the intercept adds nothing).
    pub r2_full: f64,
    /// Ezekiel-adjusted R² of the full model: `1 - (1 - R²)(n - 1)/(n - m - 1)`.
    pub r2_adj_full: f64,
    /// `(ss_term/df_term) / (ss_resid/df_resid)`.
    pub pseudo_f: f64,
}

/// Sums of squares of `full` over `reduced` on the centred matrix G
/// (McArdle & Anderson 2001; docs/methods.md, "Distance-based linear models").
/// `reduced` must span a subspace of `full` (e.g. `full = reduced.extended(X)`).
///
/// # Errors
/// [`AnalysisError::DimensionMismatch`] on size disagreement;
/// [`AnalysisError::Saturated`] when `n - k_f = 0`;
/// [`AnalysisError::EmptyTerm`] when `k_f = k_r`.
pub fn fit(g: &DMatrix<f64>, reduced: &Basis, full: &Basis) -> Result<Fit, AnalysisError> {
    let n = g.nrows();
    if g.ncols() != n || reduced.n() != n || full.n() != n {
        return Err(AnalysisError::DimensionMismatch {
            expected: n,
            found: full.n(),
        });
    }
    let (kr, kf) = (reduced.rank(), full.rank());
    if kf >= n {
        return Err(AnalysisError::Saturated { rank: kf, n });
    }
    if kf <= kr {
        return Err(AnalysisError::EmptyTerm);
    }
    let ss_total = g.trace();
    let (tr_f, tr_r) = (full.trace_hg(g), reduced.trace_hg(g));
    let ss_term = tr_f - tr_r;
    let ss_resid = ss_total - tr_f;
    let (df_term, df_resid) = (kf - kr, n - kf);
    let r2_full = tr_f / ss_total;
    Ok(Fit {
        df_term,
        ss_term,
        df_resid,
        ss_resid,
        ss_total,
        r2_term: ss_term / ss_total,
        r2_full,
        r2_adj_full: adjusted_r2(r2_full, n, kf - 1),
        pseudo_f: (ss_term / df_term as f64) / (ss_resid / df_resid as f64),
    })
}

/// Ezekiel's adjusted R² (Ezekiel 1930, *Methods of Correlation Analysis* [from memory];
/// docs/methods.md, "Distance-based linear models"): `1 - (1 - R²)(n - 1)/(n - m - 1)`,
/// m = predictor degrees of freedom (intercept excluded). NaN when `n - m - 1 <= 0`;
/// [`fit`] refuses such models first.
pub fn adjusted_r2(r2: f64, n: usize, m: usize) -> f64 {
    if n <= m + 1 {
        return f64::NAN;
    }
    1.0 - (1.0 - r2) * (n as f64 - 1.0) / ((n - m - 1) as f64)
}

/// Which sums of squares a table reports.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum SsType {
    /// Type I: each term after the terms before it.
    Sequential,
    /// Each term after all other terms.
    Marginal,
}

/// One row (term) of a sums-of-squares table.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TermSs {
    /// Term name.
    pub name: String,
    /// Degrees of freedom.
    pub df: usize,
    /// Sum of squares.
    pub ss: f64,
    /// `ss / SS_total`.
    pub r2: f64,
    /// Pseudo-F against the residual of the full model.
    pub pseudo_f: f64,
}

/// Degrees of freedom and a sum of squares.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SsRow {
    /// Degrees of freedom.
    pub df: usize,
    /// Sum of squares.
    pub ss: f64,
}

/// A sums-of-squares table for a design.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct AnovaTable {
    /// Sequential or marginal.
    pub ss_type: SsType,
    /// One row per term, in design order.
    pub terms: Vec<TermSs>,
    /// Residual of the model with every term.
    pub residual: SsRow,
    /// Total (`n - 1`, `tr(G)`).
    pub total: SsRow,
    /// R² of the model with every term.
    pub r2: f64,
    /// Ezekiel-adjusted R² of the model with every term.
    pub r2_adj: f64,
}

/// For each term, the reduced basis it is tested against and the full basis
/// (`reduced.extended(X_t)`): sequential = terms before it, marginal = all others.
///
/// # Errors
/// As [`Basis::extended`].
pub fn term_bases(design: &Design, ss_type: SsType) -> Result<Vec<(Basis, Basis)>, AnalysisError> {
    let k = design.names.len();
    let mut out = Vec::with_capacity(k);
    let mut seq = Basis::intercept(design.n);
    for t in 0..k {
        let reduced = match ss_type {
            SsType::Sequential => seq.clone(),
            SsType::Marginal => {
                let others: Vec<usize> = (0..k).filter(|&j| j != t).collect();
                design.basis(&others)?
            }
        };
        let full = reduced.extended(&design.columns[t])?;
        if ss_type == SsType::Sequential {
            seq = full.clone();
        }
        out.push((reduced, full));
    }
    Ok(out)
}

/// Sums of squares of every term of `design` on the centred matrix `g`.
///
/// # Errors
/// [`AnalysisError::Saturated`] when the full model leaves no residual df;
/// [`AnalysisError::EmptyTerm`] when a term adds nothing (e.g. collinear with earlier
/// terms); [`AnalysisError::DimensionMismatch`] on size disagreement.
pub fn anova_table(
    g: &DMatrix<f64>,
    design: &Design,
    ss_type: SsType,
) -> Result<AnovaTable, AnalysisError> {
    let n = design.n;
    if g.nrows() != n || g.ncols() != n {
        return Err(AnalysisError::DimensionMismatch {
            expected: n,
            found: g.nrows(),
        });
    }
    let all: Vec<usize> = (0..design.names.len()).collect();
    let full = design.basis(&all)?;
    let whole = fit(g, &Basis::intercept(n), &full)?;
    let bases = term_bases(design, ss_type)?;
    let ms_res = whole.ss_resid / whole.df_resid as f64;
    let mut terms = Vec::with_capacity(all.len());
    for (t, (red, fu)) in bases.iter().enumerate() {
        let f = fit(g, red, fu)?;
        terms.push(TermSs {
            name: design.names[t].clone(),
            df: f.df_term,
            ss: f.ss_term,
            r2: f.r2_term,
            pseudo_f: (f.ss_term / f.df_term as f64) / ms_res,
        });
    }
    Ok(AnovaTable {
        ss_type,
        terms,
        residual: SsRow {
            df: whole.df_resid,
            ss: whole.ss_resid,
        },
        total: SsRow {
            df: n - 1,
            ss: whole.ss_total,
        },
        r2: whole.r2_full,
        r2_adj: whole.r2_adj_full,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn centred_euclid(y: &DMatrix<f64>) -> DMatrix<f64> {
        // G = Yc Yc' for Euclidean D (Gower 1966).
        let mut yc = y.clone();
        for mut c in yc.column_iter_mut() {
            let m = c.mean();
            c.add_scalar_mut(-m);
        }
        &yc * yc.transpose()
    }

    #[test]
    fn grouping_sorts_levels_first_is_reference() {
        let g = Grouping::from_labels(&["b", "a", "c", "a"]);
        assert_eq!(g.levels(), &["a", "b", "c"]);
        assert_eq!(g.codes(), &[1, 0, 2, 0]);
        let x = g.treatment_columns();
        assert_eq!(x.ncols(), 2);
        assert_eq!(x[(0, 0)], 1.0);
        assert_eq!(x[(2, 1)], 1.0);
        assert_eq!(x.row(1).sum(), 0.0);
    }

    #[test]
    fn collinear_columns_are_detected() {
        // Profiles sum to 1 = the intercept (docs/methods.md, "The shape design"): the
        // intercept and all p profile columns give rank p.
        let p = DMatrix::from_row_slice(
            4,
            3,
            &[0.2, 0.3, 0.5, 0.1, 0.1, 0.8, 0.6, 0.2, 0.2, 0.3, 0.3, 0.4],
        );
        let b = Basis::intercept(4).extended(&p).unwrap();
        assert_eq!(b.rank(), 3);
        let qtq = b.q().transpose() * b.q();
        assert!((qtq - DMatrix::identity(3, 3)).abs().max() < 1e-12);
    }

    #[test]
    fn saturated_and_empty_terms_are_refused() {
        let y = DMatrix::from_row_slice(3, 1, &[1.0, 2.0, 4.0]);
        let g = centred_euclid(&y);
        let grp = Grouping::from_labels(&["a", "b", "c"]);
        let d = Design::new(3, vec![Term::new("g", TermSpec::Factor(grp))]).unwrap();
        assert_eq!(
            anova_table(&g, &d, SsType::Sequential),
            Err(AnalysisError::Saturated { rank: 3, n: 3 })
        );
        let cov = TermSpec::Covariate(vec![1.0, 1.0, 1.0]);
        let d = Design::new(3, vec![Term::new("c", cov)]).unwrap();
        assert_eq!(
            anova_table(&g, &d, SsType::Sequential),
            Err(AnalysisError::EmptyTerm)
        );
    }

    #[test]
    fn sequential_terms_add_up_to_model_ss() {
        // common practice, no source: type I sums of squares add up to the model SS.
        let y = DMatrix::from_row_slice(
            8,
            2,
            &[
                1., 2., 3., 1., 4., 4., 2., 7., 5., 5., 9., 1., 2., 2., 6., 3.,
            ],
        );
        let g = centred_euclid(&y);
        let grp = Grouping::from_labels(&["a", "a", "b", "b", "c", "c", "a", "b"]);
        let cov = TermSpec::Covariate(vec![0.5, 1.0, 3.0, 2.0, 8.0, 1.0, 0.0, 4.0]);
        let d = Design::new(
            8,
            vec![Term::new("g", TermSpec::Factor(grp)), Term::new("x", cov)],
        )
        .unwrap();
        let t = anova_table(&g, &d, SsType::Sequential).unwrap();
        let sum: f64 = t.terms.iter().map(|r| r.ss).sum();
        assert!((sum + t.residual.ss - t.total.ss).abs() < 1e-10);
        assert_eq!(t.residual.df, 4);
        assert!((t.total.ss - g.trace()).abs() < 1e-12);
    }

    #[test]
    fn extended_basis_stays_orthonormal_on_rank_deficient_blocks() {
        // Row profiles sum to 1 (the intercept), so [1, ln t, profiles] is rank
        // deficient by one; the basis must still be orthonormal, and its projection
        // must equal the least-squares fit of statsmodels (partition_ols.json).
        let fx: serde_json::Value =
            serde_json::from_str(include_str!("../../tests/reference/partition_ols.json")).unwrap();
        for c in fx["cases"].as_array().unwrap() {
            let rows: Vec<Vec<f64>> = c["counts"]
                .as_array()
                .unwrap()
                .iter()
                .map(|r| {
                    r.as_array()
                        .unwrap()
                        .iter()
                        .map(|v| v.as_f64().unwrap())
                        .collect()
                })
                .collect();
            let (n, p) = (rows.len(), rows[0].len());
            let t: Vec<f64> = rows.iter().map(|r| r.iter().sum()).collect();
            let s = DMatrix::from_fn(n, 1, |i, _| t[i].ln());
            let prof = DMatrix::from_fn(n, p, |i, j| rows[i][j] / t[i]);
            let b = Basis::intercept(n)
                .extended(&s)
                .unwrap()
                .extended(&prof)
                .unwrap();
            assert_eq!(b.rank(), p + 1);
            let qtq = b.q().transpose() * b.q();
            assert!((qtq - DMatrix::<f64>::identity(p + 1, p + 1)).norm() < 1e-12);
        }
    }
}
