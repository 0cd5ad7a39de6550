//! PERMANOVA (Anderson 2001, Austral Ecol. 26:32-46): the one-way fast path, the
//! general multi-term path through the distance-based linear model with Freedman–Lane
//! permutation of residuals under the reduced model (Freedman & Lane 1983; McArdle &
//! Anderson 2001; docs/methods.md, "PERMANOVA"), and pairwise comparisons with Holm
//! and Benjamini–Hochberg adjustment.
//!
//! Owns: [`permanova_oneway`], [`permanova`], [`pairwise`] and their result types.
//! The one-way path squares D once into a dense n × n row-major array and, per
//! permutation, sums only the within-group pairs (`SS_W = Σ_g (1/n_g) Σ_{i<k∈g} d²_ik`),
//! permutations in batches so each row stays in cache across the batch
//! (docs/methods.md, "Computing many permutations").
//! That square is made once per test (8n² bytes: 32 MB at n = 2000), never per
//! permutation. The general path works on G (also n × n) and permutes basis rows.

use nalgebra::DMatrix;
use serde::Serialize;

use super::gower::gower_centre;
use super::linear_model::{self, Basis, Design, Grouping, SsRow, SsType};
use super::permutation::{self, PermutationOptions, PermutationResult, Permuter, Progress, Scheme};
use super::{AnalysisError, DistanceMatrix};

/// Options of a PERMANOVA.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PermanovaOptions {
    /// Random permutations requested (exact enumeration when fewer are distinct).
    pub permutations: usize,
    /// Generator seed (every term is tested with the same permutation stream).
    pub seed: u64,
    /// Exchangeability scheme.
    pub scheme: Scheme,
    /// Sequential or marginal sums of squares (multi-term path).
    pub ss_type: SsType,
}

/// How permuted statistics were obtained.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum PermutationMethod {
    /// Permutation of group labels (one-way designs).
    Labels,
    /// Permutation of residuals under each term's reduced model (Freedman & Lane 1983).
    FreedmanLane,
}

/// The test of one term.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TermTest {
    /// Term name.
    pub name: String,
    /// Degrees of freedom.
    pub df: usize,
    /// Sum of squares.
    pub ss: f64,
    /// `ss / SS_total`.
    pub r2: f64,
    /// Pseudo-F against the residual.
    pub pseudo_f: f64,
    /// Permutation p-value.
    pub p_value: f64,
    /// Permutations evaluated for this term.
    pub permutations: usize,
    /// True when enumerated exactly.
    pub exact: bool,
    /// Smallest attainable p-value: 1/arrangements when exact, 1/(permutations + 1)
    /// otherwise.
    #[serde(rename = "smallest_possible_p")]
    pub min_p: f64,
    /// The exchangeability scheme this term was tested under, described.
    pub scheme: String,
}

/// A PERMANOVA table with permutation p-values.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PermanovaResult {
    /// One entry per term.
    pub terms: Vec<TermTest>,
    /// Residual df and SS.
    pub residual: SsRow,
    /// Total df and SS.
    pub total: SsRow,
    /// Sequential or marginal.
    pub ss_type: SsType,
    /// Label permutation or Freedman–Lane.
    pub method: PermutationMethod,
    /// Permutations evaluated (the largest over terms).
    pub permutations: usize,
    /// True when every term was enumerated exactly.
    pub exact: bool,
    /// Generator seed.
    pub seed: u64,
    /// Exchangeability scheme, described.
    pub scheme: String,
}

/// Batches within a block: rows stay in cache across this many permutations.
const SUB_BATCH: usize = 64;

/// Compact sample index for the gather loop.
trait Index: Copy + Default {
    /// From a position known to fit (n was checked by the caller).
    fn from_usize(v: usize) -> Self;
    /// Back to usize.
    fn get(self) -> usize;
}

impl Index for u16 {
    fn from_usize(v: usize) -> Self {
        u16::try_from(v).expect("invariant: caller checked n <= u16::MAX")
    }
    #[inline(always)]
    fn get(self) -> usize {
        usize::from(self)
    }
}

impl Index for u32 {
    fn from_usize(v: usize) -> Self {
        u32::try_from(v).expect("invariant: n fits u32 (a u32 n x n matrix would not fit memory)")
    }
    #[inline(always)]
    fn get(self) -> usize {
        self as usize
    }
}

/// Precomputed state of the one-way statistic.
struct OneWay {
    n: usize,
    a: usize,
    d2: Vec<f64>,
    codes: Vec<usize>,
    ss_total: f64,
}

impl OneWay {
    fn new(d: &DistanceMatrix, g: &Grouping) -> Self {
        let n = d.n();
        let mut d2 = vec![0.0; n * n];
        let mut ss = 0.0;
        for i in 0..n {
            for k in (i + 1)..n {
                let v = d.get(i, k).powi(2);
                d2[i * n + k] = v;
                d2[k * n + i] = v;
                ss += v;
            }
        }
        OneWay {
            n,
            a: g.n_groups(),
            d2,
            codes: g.codes().to_vec(),
            ss_total: ss / n as f64,
        }
    }

    fn f_of(&self, ssw: f64) -> f64 {
        ((self.ss_total - ssw) / (self.a - 1) as f64) / (ssw / (self.n - self.a) as f64)
    }

    /// SS_W of each permutation in `perms` (k × n).
    fn ss_within(&self, perms: &[usize], out: &mut [f64]) {
        if self.n <= usize::from(u16::MAX) {
            self.ss_within_idx::<u16>(perms, out);
        } else {
            self.ss_within_idx::<u32>(perms, out);
        }
    }

    /// [`OneWay::ss_within`] with sample indices stored as `I` (u16 halves the index
    /// traffic when n ≤ 65535).
    fn ss_within_idx<I: Index>(&self, perms: &[usize], out: &mut [f64]) {
        let (n, a) = (self.n, self.a);
        let k = out.len();
        let idx = I::from_usize;
        // members[p*n ..]: the positions of each group in ascending order, group by group;
        // slot[i*k + p]: where position i sits in that list; group[i*k + p]: its group.
        // Group sizes are those of the data, except under whole-site label sources
        // (sites of unequal size), where they follow the permuted labels: offs[p*(a+1)..].
        let mut offs = vec![0usize; k * (a + 1)];
        for p in 0..k {
            let o = &mut offs[p * (a + 1)..(p + 1) * (a + 1)];
            for &src in &perms[p * n..(p + 1) * n] {
                o[self.codes[src] + 1] += 1;
            }
            for g in 0..a {
                o[g + 1] += o[g];
            }
        }
        let mut members = vec![I::default(); k * n];
        let mut slot = vec![0u32; k * n];
        let mut group = vec![0u32; k * n];
        let mut next = vec![0usize; a];
        for p in 0..k {
            next.copy_from_slice(&offs[p * (a + 1)..p * (a + 1) + a]);
            let perm = &perms[p * n..(p + 1) * n];
            for (i, &src) in perm.iter().enumerate() {
                let g = self.codes[src];
                members[p * n + next[g]] = idx(i);
                slot[i * k + p] = next[g] as u32;
                group[i * k + p] = g as u32;
                next[g] += 1;
            }
        }
        let mut acc = vec![0.0; k * a];
        for i in 0..n {
            let row = &self.d2[i * n..(i + 1) * n];
            for p in 0..k {
                let g = group[i * k + p] as usize;
                let start = slot[i * k + p] as usize + 1;
                let end = offs[p * (a + 1) + g + 1];
                let list = &members[p * n + start..p * n + end];
                let mut s = [0.0f64; 4];
                let mut chunks = list.chunks_exact(4);
                for c in &mut chunks {
                    s[0] += row[c[0].get()];
                    s[1] += row[c[1].get()];
                    s[2] += row[c[2].get()];
                    s[3] += row[c[3].get()];
                }
                for &m in chunks.remainder() {
                    s[0] += row[m.get()];
                }
                acc[p * a + g] += (s[0] + s[1]) + (s[2] + s[3]);
            }
        }
        for p in 0..k {
            let o = &offs[p * (a + 1)..(p + 1) * (a + 1)];
            out[p] = (0..a)
                .map(|g| acc[p * a + g] * (1.0 / (o[g + 1] - o[g]) as f64))
                .sum();
        }
    }

    fn f_batch(&self, perms: &[usize], out: &mut [f64]) {
        let n = self.n;
        for (pc, oc) in perms.chunks(SUB_BATCH * n).zip(out.chunks_mut(SUB_BATCH)) {
            self.ss_within(pc, oc);
            for o in oc.iter_mut() {
                *o = self.f_of(*o);
            }
        }
    }
}

pub(crate) fn check_groups(g: &Grouping, n: usize) -> Result<(), AnalysisError> {
    if g.n() != n {
        return Err(AnalysisError::DimensionMismatch {
            expected: n,
            found: g.n(),
        });
    }
    if g.n_groups() < 2 {
        return Err(AnalysisError::TooFewGroups {
            found: g.n_groups(),
            min: 2,
        });
    }
    if n <= g.n_groups() {
        return Err(AnalysisError::Saturated {
            rank: g.n_groups(),
            n,
        });
    }
    Ok(())
}

/// One-way PERMANOVA by label permutation (Anderson 2001): `SS_T = (1/N) Σ_{i<k} d²`,
/// `SS_W = Σ_g (1/n_g) Σ_{i<k∈g} d²`, `F = (SS_A/(a-1)) / (SS_W/(N-a))`.
///
/// # Examples
/// ```
/// use tally::analysis::DistanceMatrix;
/// use tally::analysis::linear_model::{Grouping, SsType};
/// use tally::analysis::permanova::{PermanovaOptions, permanova_oneway};
/// use tally::analysis::permutation::Scheme;
/// let x: [f64; 6] = [1.0, 2.0, 3.0, 7.0, 8.0, 9.0];
/// let d = DistanceMatrix::from_fn(6, |i, k| (x[i] - x[k]).abs())?;
/// let g = Grouping::from_labels(&["a", "a", "a", "b", "b", "b"]);
/// let o = PermanovaOptions { permutations: 999, seed: 1, scheme: Scheme::Free, ss_type: SsType::Sequential };
/// let r = permanova_oneway(&d, &g, &o, None)?;
/// // Euclidean on one variable: the ANOVA F, 54 / (4/4) = 54; C(6,3) = 20 labelings, exact.
/// assert!((r.terms[0].pseudo_f - 54.0).abs() < 1e-9);
/// assert!(r.exact && (r.terms[0].p_value - 0.1).abs() < 1e-12);
/// # Ok::<(), tally::analysis::AnalysisError>(())
/// ```
///
/// # Errors
/// [`AnalysisError::DimensionMismatch`], [`AnalysisError::TooFewGroups`] (fewer than 2),
/// [`AnalysisError::Saturated`] (no residual df), and the errors of the permuter
/// (strata/blocks) and of [`permutation::permutation_test`].
pub fn permanova_oneway(
    d: &DistanceMatrix,
    groups: &Grouping,
    opts: &PermanovaOptions,
    progress: Option<Progress<'_>>,
) -> Result<PermanovaResult, AnalysisError> {
    let n = d.n();
    check_groups(groups, n)?;
    let k = OneWay::new(d, groups);
    let identity: Vec<usize> = (0..n).collect();
    let mut ssw = [0.0];
    k.ss_within(&identity, &mut ssw);
    let ssw = ssw[0];
    let observed = k.f_of(ssw);
    let permuter = Permuter::new(n, &opts.scheme, Some(groups.codes()))?;
    let popts = PermutationOptions {
        permutations: opts.permutations,
        seed: opts.seed,
    };
    let stat = |perms: &[usize], out: &mut [f64]| k.f_batch(perms, out);
    let res = permutation::permutation_test(&permuter, observed, &popts, &stat, progress)?;
    let a = groups.n_groups();
    let term = TermTest {
        name: "groups".to_string(),
        df: a - 1,
        ss: k.ss_total - ssw,
        r2: (k.ss_total - ssw) / k.ss_total,
        pseudo_f: observed,
        p_value: res.p_value,
        permutations: res.permutations,
        exact: res.exact,
        min_p: res.min_p,
        scheme: permuter.scheme().describe(),
    };
    Ok(PermanovaResult {
        terms: vec![term],
        residual: SsRow { df: n - a, ss: ssw },
        total: SsRow {
            df: n - 1,
            ss: k.ss_total,
        },
        ss_type: SsType::Sequential,
        method: PermutationMethod::Labels,
        permutations: res.permutations,
        exact: res.exact,
        seed: res.seed,
        scheme: res.scheme,
    })
}

/// `R G R` with `R = I - Q Q'` (the centred matrix of residuals under a reduced model).
pub(crate) fn residualise(g: &DMatrix<f64>, q: &DMatrix<f64>) -> DMatrix<f64> {
    let gq = g * q;
    let qgq = q.transpose() * &gq;
    let mut out = g - q * gq.transpose() - &gq * q.transpose();
    out += q * qgq * q.transpose();
    out
}

/// Freedman–Lane statistic of one term. `model` is an orthonormal basis of the whole
/// model whose columns `k_reduced..k_full` span what the term adds to its reduced model
/// (the first `k_reduced` columns span the reduced model): the numerator is
/// `tr((H_f - H_r) G*)`, the denominator the residual of the whole model `tr((I - H) G*)`.
pub(crate) struct PartialTerm<'a> {
    gr: DMatrix<f64>,
    model: &'a Basis,
    k_reduced: usize,
    k_full: usize,
    df_resid: usize,
}

impl<'a> PartialTerm<'a> {
    /// The test of `full` over `reduced` on the centred matrix `g` when `full` is the
    /// whole model (its residual is the denominator), residuals permuted under `reduced`.
    pub(crate) fn new(g: &DMatrix<f64>, reduced: &Basis, full: &'a Basis) -> Self {
        PartialTerm {
            gr: residualise(g, reduced.q()),
            model: full,
            k_reduced: reduced.rank(),
            k_full: full.rank(),
            df_resid: full.n() - full.rank(),
        }
    }

    /// Pseudo-F of each permutation in `perms` (k × n, laid end to end).
    pub(crate) fn f_batch(&self, perms: &[usize], out: &mut [f64]) {
        let n = self.gr.nrows();
        let q = self.model.q();
        let kf = q.ncols();
        let df_term = (self.k_full - self.k_reduced) as f64;
        let tr = self.gr.trace();
        let sub = 32;
        for (pc, oc) in perms.chunks(sub * n).zip(out.chunks_mut(sub)) {
            let m = oc.len();
            // w_c[perm[i]] = q_c[i]: tr(H P G_R P') = Σ_c w_c' G_R w_c.
            let mut w = DMatrix::<f64>::zeros(n, kf * m);
            for p in 0..m {
                let perm = &pc[p * n..(p + 1) * n];
                for c in 0..kf {
                    let mut col = w.column_mut(p * kf + c);
                    for (i, &src) in perm.iter().enumerate() {
                        col[src] = q[(i, c)];
                    }
                }
            }
            let gw = &self.gr * &w;
            for (p, o) in oc.iter_mut().enumerate() {
                let mut s_all = 0.0;
                let mut s_term = 0.0;
                for c in 0..kf {
                    let v = w.column(p * kf + c).dot(&gw.column(p * kf + c));
                    s_all += v;
                    if c >= self.k_reduced && c < self.k_full {
                        s_term += v;
                    }
                }
                *o = (s_term / df_term) / ((tr - s_all) / self.df_resid as f64);
            }
        }
    }
}

/// Multi-term PERMANOVA through the distance-based linear model (McArdle & Anderson
/// 2001; docs/methods.md, "Distance-based linear models" and
/// docs/methods.md, "Permutation schemes and p-values"). Each term is tested against its
/// reduced model (terms before it, or all others when marginal) by permuting residuals
/// under that reduced model: `G_R = R_r G R_r`,
/// `F* = [tr((H_f - H_r) G*)/df] / [tr((I - H_f) G*)/df_res]` with `G* = P G_R P'`,
/// permutations restricted by `opts.scheme`.
///
/// # Errors
/// As [`linear_model::anova_table`], the permuter and [`permutation::permutation_test`].
pub fn permanova(
    d: &DistanceMatrix,
    design: &Design,
    opts: &PermanovaOptions,
    progress: Option<Progress<'_>>,
) -> Result<PermanovaResult, AnalysisError> {
    let schemes = vec![opts.scheme.clone(); design.names().len()];
    permanova_by_term(d, design, opts, &schemes, progress)
}

/// [`permanova`] with each term tested under its own scheme (`schemes[t]` for term t;
/// `opts.scheme` is ignored): a term constant within sites is tested by moving whole
/// sites, a term that varies within sites by permutations within sites (split-plot
/// logic; docs/methods.md, "Permutation designs for revisited sites").
///
/// # Errors
/// As [`permanova`]; [`AnalysisError::DimensionMismatch`] when `schemes` does not have
/// one scheme per term; [`AnalysisError::InvalidArgument`] for a whole-site scheme over
/// sites of unequal size (residuals are rows and cannot be relabelled).
pub fn permanova_by_term(
    d: &DistanceMatrix,
    design: &Design,
    opts: &PermanovaOptions,
    schemes: &[Scheme],
    progress: Option<Progress<'_>>,
) -> Result<PermanovaResult, AnalysisError> {
    let n = d.n();
    if design.n() != n {
        return Err(AnalysisError::DimensionMismatch {
            expected: n,
            found: design.n(),
        });
    }
    if schemes.len() != design.names().len() {
        return Err(AnalysisError::DimensionMismatch {
            expected: design.names().len(),
            found: schemes.len(),
        });
    }
    let g = gower_centre(d);
    let table = linear_model::anova_table(&g, design, opts.ss_type)?;
    let bases = linear_model::term_bases(design, opts.ss_type)?;
    // A design made of one factor is a one-way design: arrangements that only swap
    // samples of the same level give the same F, so distinct labelings are counted.
    let labels = if design.names().len() == 1 {
        design.factor(0).map(Grouping::codes)
    } else {
        None
    };
    let permuters = schemes
        .iter()
        .map(|s| {
            let p = Permuter::new(n, s, labels)?;
            p.require_row_moves("the test of a term beside others (Freedman–Lane residuals)")?;
            Ok(p)
        })
        .collect::<Result<Vec<Permuter>, AnalysisError>>()?;
    let popts = PermutationOptions {
        permutations: opts.permutations,
        seed: opts.seed,
    };
    let mut terms = Vec::with_capacity(bases.len());
    let mut results: Vec<PermutationResult> = Vec::new();
    // Sequential bases are built by extension, so each term's full basis is a prefix of
    // the last one, which spans the whole model; marginal full bases span it already.
    let last = bases.last().map(|b| b.1.clone());
    for ((row, (red, full)), permuter) in table.terms.iter().zip(&bases).zip(&permuters) {
        let model = match (opts.ss_type, &last) {
            (SsType::Sequential, Some(l)) => l,
            _ => full,
        };
        let pt = PartialTerm {
            gr: residualise(&g, red.q()),
            model,
            k_reduced: red.rank(),
            k_full: full.rank(),
            df_resid: table.residual.df,
        };
        let identity: Vec<usize> = (0..n).collect();
        let mut obs = [0.0];
        pt.f_batch(&identity, &mut obs);
        debug_assert!(
            (obs[0] - row.pseudo_f).abs() <= 1e-8 * row.pseudo_f.abs().max(1.0),
            "invariant: the identity permutation reproduces the table F"
        );
        let stat = |perms: &[usize], out: &mut [f64]| pt.f_batch(perms, out);
        let res = permutation::permutation_test(permuter, obs[0], &popts, &stat, progress)?;
        terms.push(TermTest {
            name: row.name.clone(),
            df: row.df,
            ss: row.ss,
            r2: row.r2,
            pseudo_f: row.pseudo_f,
            p_value: res.p_value,
            permutations: res.permutations,
            exact: res.exact,
            min_p: res.min_p,
            scheme: permuter.scheme().describe(),
        });
        results.push(res);
    }
    Ok(PermanovaResult {
        terms,
        residual: table.residual,
        total: table.total,
        ss_type: opts.ss_type,
        method: PermutationMethod::FreedmanLane,
        permutations: results.iter().map(|r| r.permutations).max().unwrap_or(0),
        exact: results.iter().all(|r| r.exact),
        seed: opts.seed,
        scheme: {
            let mut d: Vec<String> = permuters.iter().map(|p| p.scheme().describe()).collect();
            d.dedup();
            d.join("; ")
        },
    })
}

/// One pairwise comparison.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PairTest {
    /// First group.
    pub a: String,
    /// Second group.
    pub b: String,
    /// Samples in a and in b.
    pub n: (usize, usize),
    /// Pseudo-F of the two-group PERMANOVA.
    pub pseudo_f: f64,
    /// R² of the two-group PERMANOVA.
    pub r2: f64,
    /// Unadjusted permutation p-value.
    pub p_value: f64,
    /// Holm-adjusted p-value over all pairs.
    pub p_holm: f64,
    /// Benjamini–Hochberg-adjusted p-value over all pairs.
    pub p_bh: f64,
    /// Permutations evaluated.
    pub permutations: usize,
    /// Exactly enumerated.
    pub exact: bool,
    /// Smallest attainable p-value for this pair.
    #[serde(rename = "smallest_possible_p")]
    pub min_p: f64,
}

/// PERMANOVA for every pair of groups on the sub-matrix of D (D is computed once on the
/// full data and subset: docs/methods.md, "Transformations"), with Holm and BH
/// adjustment (docs/methods.md, "Multiple testing").
///
/// # Errors
/// As [`permanova_oneway`] for each pair (e.g. a pair with only 2 samples is saturated).
pub fn pairwise(
    d: &DistanceMatrix,
    groups: &Grouping,
    opts: &PermanovaOptions,
    progress: Option<Progress<'_>>,
) -> Result<Vec<PairTest>, AnalysisError> {
    check_groups(groups, d.n())?;
    let a = groups.n_groups();
    let mut out = Vec::new();
    for x in 0..a {
        for y in (x + 1)..a {
            let idx: Vec<usize> = (0..d.n())
                .filter(|&i| groups.codes()[i] == x || groups.codes()[i] == y)
                .collect();
            let sub = d.subset(&idx);
            let sg = groups.subset(&idx);
            let sopts = PermanovaOptions {
                scheme: opts.scheme.subset(&idx),
                ..opts.clone()
            };
            let r = permanova_oneway(&sub, &sg, &sopts, progress)?;
            let sizes = sg.sizes();
            let t = &r.terms[0];
            out.push(PairTest {
                a: groups.levels()[x].clone(),
                b: groups.levels()[y].clone(),
                n: (sizes[0], sizes[1]),
                pseudo_f: t.pseudo_f,
                r2: t.r2,
                p_value: t.p_value,
                p_holm: 0.0,
                p_bh: 0.0,
                permutations: t.permutations,
                exact: t.exact,
                min_p: t.min_p,
            });
        }
    }
    let p: Vec<f64> = out.iter().map(|t| t.p_value).collect();
    for ((t, h), b) in out
        .iter_mut()
        .zip(permutation::holm(&p))
        .zip(permutation::benjamini_hochberg(&p))
    {
        t.p_holm = h;
        t.p_bh = b;
    }
    Ok(out)
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;
    use crate::analysis::linear_model::{Term, TermSpec};

    /// The toy community (docs/methods.md, "The toy community").
    pub(crate) use crate::analysis::prec::test_data::TOY;

    /// Bray-Curtis, `Σ|y_i - y_k| / Σ(y_i + y_k)` (Bray & Curtis 1957), local to the tests.
    pub(crate) fn bray_curtis(rows: &[Vec<f64>]) -> DistanceMatrix {
        DistanceMatrix::from_fn(rows.len(), |i, k| {
            let num: f64 = rows[i]
                .iter()
                .zip(&rows[k])
                .map(|(a, b)| (a - b).abs())
                .sum();
            let den: f64 = rows[i].iter().zip(&rows[k]).map(|(a, b)| a + b).sum();
            num / den
        })
        .unwrap()
    }

    fn toy() -> (DistanceMatrix, Grouping) {
        let rows: Vec<Vec<f64>> = TOY.iter().map(|r| r.to_vec()).collect();
        let labels: Vec<&str> = (0..10).map(|i| if i < 5 { "A" } else { "B" }).collect();
        (bray_curtis(&rows), Grouping::from_labels(&labels))
    }

    fn opts(permutations: usize, scheme: Scheme) -> PermanovaOptions {
        PermanovaOptions {
            permutations,
            seed: 1,
            scheme,
            ss_type: SsType::Sequential,
        }
    }

    #[test]
    fn toy_community_worked_example() {
        // docs/methods.md, "The toy community", derived from the formulas of
        // docs/methods.md, "PERMANOVA" (computed with NumPy, no publication):
        // SS_T = 1.521270838, SS_W = 0.463061118, F = 18.281987915, R² = 0.695609022;
        // exact enumeration over C(10,5) = 252 labelings gives 2 statistics >= F,
        // p = 2/252 = 0.0079365 (also so by scipy.stats.permutation_test).
        let (d, g) = toy();
        let r = permanova_oneway(&d, &g, &opts(999, Scheme::Free), None).unwrap();
        assert!((r.total.ss - 1.521270838).abs() < 1e-8);
        assert!((r.residual.ss - 0.463061118).abs() < 1e-8);
        assert!((r.terms[0].pseudo_f - 18.281987915).abs() < 1e-8);
        assert!((r.terms[0].r2 - 0.695609022).abs() < 1e-8);
        assert!(r.exact);
        assert_eq!(r.permutations, 252);
        assert!((r.terms[0].p_value - 2.0 / 252.0).abs() < 1e-12);
        // Same F by the trace route of the linear model (docs/methods.md, "PERMANOVA").
        let design =
            Design::new(10, vec![Term::new("groups", TermSpec::Factor(g.clone()))]).unwrap();
        let r2 = permanova(&d, &design, &opts(999, Scheme::Free), None).unwrap();
        assert!((r2.terms[0].pseudo_f - 18.281987915).abs() < 1e-8);
        assert!(r2.exact);
        assert!((r2.terms[0].p_value - 2.0 / 252.0).abs() < 1e-12);
        // With a second term the arrangements are all 10! sample orders: random.
        let cov = TermSpec::Covariate((0..10).map(|i| (i as f64).sqrt()).collect());
        let design2 = Design::new(
            10,
            vec![
                Term::new("groups", TermSpec::Factor(g.clone())),
                Term::new("c", cov),
            ],
        )
        .unwrap();
        let r3 = permanova(&d, &design2, &opts(99, Scheme::Free), None).unwrap();
        assert!(!r3.exact && r3.permutations == 99 && r3.terms.len() == 2);
    }

    /// Brute force: every assignment of 3 samples to group A among 6, F computed from
    /// the formulas directly, compared with the engine's exact mode.
    #[test]
    fn exact_three_plus_three_matches_brute_force() {
        let rows: Vec<Vec<f64>> = TOY[2..8].iter().map(|r| r.to_vec()).collect();
        let d = bray_curtis(&rows);
        let f = |ina: &[bool]| {
            let n = 6.0;
            let mut sst = 0.0;
            let mut ssw = 0.0;
            for i in 0..6 {
                for k in (i + 1)..6 {
                    let v = d.get(i, k).powi(2);
                    sst += v / n;
                    if ina[i] == ina[k] {
                        ssw += v / 3.0;
                    }
                }
            }
            (sst - ssw) / (ssw / 4.0)
        };
        let obs_lab = [true, true, true, false, false, false];
        let obs = f(&obs_lab);
        let mut count = 0;
        let mut total = 0;
        for mask in 0u32..64 {
            if mask.count_ones() != 3 {
                continue;
            }
            let lab: Vec<bool> = (0..6).map(|i| mask & (1 << i) != 0).collect();
            total += 1;
            if f(&lab) >= obs * (1.0 - 1e-9) {
                count += 1;
            }
        }
        assert_eq!(total, 20);
        let g = Grouping::from_labels(&["a", "a", "a", "b", "b", "b"]);
        let r = permanova_oneway(&d, &g, &opts(99, Scheme::Free), None).unwrap();
        assert!(r.exact);
        assert_eq!(r.permutations, 20);
        assert!((r.terms[0].pseudo_f - obs).abs() < 1e-10);
        assert!((r.terms[0].p_value - count as f64 / 20.0).abs() < 1e-12);
    }

    #[test]
    fn random_permutations_give_plus_one_p_and_agree_between_paths() {
        let (d, g) = toy();
        let o = opts(99, Scheme::Free);
        let r = permanova_oneway(&d, &g, &o, None).unwrap();
        // 252 distinct > 99 requested: random, p = (b+1)/(P+1) >= 1/100.
        assert!(!r.exact);
        assert_eq!(r.permutations, 99);
        assert!(r.terms[0].p_value >= 0.01 && r.terms[0].p_value <= 0.2);
        let design = Design::new(10, vec![Term::new("g", TermSpec::Factor(g))]).unwrap();
        let r2 = permanova(&d, &design, &o, None).unwrap();
        // Same seed, same permutations, same F for each: the two paths give the same p.
        assert_eq!(r.terms[0].p_value, r2.terms[0].p_value);
    }

    #[test]
    fn pairwise_reports_adjusted_p_values() {
        let rows: Vec<Vec<f64>> = TOY
            .iter()
            .chain(TOY[..5].iter())
            .map(|r| r.to_vec())
            .collect();
        let labels: Vec<&str> = (0..15).map(|i| ["A", "B", "C"][i / 5]).collect();
        let d = bray_curtis(&rows);
        let g = Grouping::from_labels(&labels);
        let p = pairwise(&d, &g, &opts(99, Scheme::Free), None).unwrap();
        assert_eq!(p.len(), 3);
        let raw: Vec<f64> = p.iter().map(|t| t.p_value).collect();
        let holm = permutation::holm(&raw);
        for (t, h) in p.iter().zip(holm) {
            assert_eq!(t.p_holm, h);
            assert!(t.p_bh <= t.p_holm + 1e-15);
        }
        // A vs C are identical samples: F = 0.
        assert!(p[1].pseudo_f.abs() < 1e-12);
        assert_eq!((p[0].a.as_str(), p[0].b.as_str()), ("A", "B"));
    }

    #[test]
    fn freedman_lane_distance_form_equals_textbook_coordinate_form() {
        // Freedman & Lane (1983) [from memory];
        // docs/methods.md, "Permutation schemes and p-values": permuting G_R = R_r G R_r
        // gives the same F* as the textbook route Y* = H_r Y + P R_r Y refitted in
        // coordinates, for Euclidean D.
        let n = 12;
        let y = DMatrix::from_fn(n, 3, |i, j| {
            (((i * 7 + j * 5) % 11) as f64).sin() * 3.0 + (i % 3) as f64 * j as f64
        });
        let z: Vec<f64> = (0..n).map(|i| (i as f64 * 0.7).cos()).collect();
        let f = Grouping::from_codes(&(0..n).map(|i| i % 3).collect::<Vec<_>>());
        let design = Design::new(
            n,
            vec![
                Term::new("z", TermSpec::Covariate(z)),
                Term::new("f", TermSpec::Factor(f)),
            ],
        )
        .unwrap();
        let rows: Vec<Vec<f64>> = y.row_iter().map(|r| r.iter().copied().collect()).collect();
        let d = DistanceMatrix::from_fn(n, |i, k| {
            rows[i]
                .iter()
                .zip(&rows[k])
                .map(|(a, b)| (a - b).powi(2))
                .sum::<f64>()
                .sqrt()
        })
        .unwrap();
        let g = gower_centre(&d);
        let bases = linear_model::term_bases(&design, SsType::Sequential).unwrap();
        let all = &bases[1].1;
        let df_resid = n - all.rank();
        let permuter = Permuter::new(n, &Scheme::Free, None).unwrap();
        let mut rng = permutation::block_rng(5, 0);
        // Both sequential terms: z (reduced = intercept) and f | z; the denominator is the
        // residual of the whole model in both.
        for (red, full) in &bases {
            let pt = PartialTerm {
                gr: residualise(&g, red.q()),
                model: all,
                k_reduced: red.rank(),
                k_full: full.rank(),
                df_resid,
            };
            let df_term = (full.rank() - red.rank()) as f64;
            let hr_y = red.q() * (red.q().transpose() * &y);
            let resid = &y - &hr_y;
            for _ in 0..5 {
                let mut perm = vec![0; n];
                permuter.random(&mut rng, &mut perm);
                let mut out = [0.0];
                pt.f_batch(&perm, &mut out);
                let ystar = DMatrix::from_fn(n, 3, |i, j| hr_y[(i, j)] + resid[(perm[i], j)]);
                let fit_f = (full.q().transpose() * &ystar).norm_squared();
                let fit_r = (red.q().transpose() * &ystar).norm_squared();
                let fit_all = (all.q().transpose() * &ystar).norm_squared();
                let f_coord = ((fit_f - fit_r) / df_term)
                    / ((ystar.norm_squared() - fit_all) / df_resid as f64);
                assert!(
                    (out[0] - f_coord).abs() < 1e-9 * f_coord.abs().max(1.0),
                    "{} vs {f_coord}",
                    out[0]
                );
            }
        }
    }

    #[test]
    fn progress_reaches_the_total() {
        let (d, g) = toy();
        let last = std::sync::Mutex::new((0, 0));
        let cb = |done: usize, total: usize| {
            let mut l = last.lock().unwrap();
            if done > l.0 {
                *l = (done, total);
            }
        };
        permanova_oneway(&d, &g, &opts(600, Scheme::Free), Some(&cb)).unwrap();
        // 252 distinct labelings <= 600: exact, so the total is 252.
        assert_eq!(*last.lock().unwrap(), (252, 252));
    }

    #[test]
    fn strata_restrict_the_exact_enumeration() {
        // Two strata of 5 (rows 0,1,2,5,6 and 3,4,7,8,9), labels A A A B B and A A B B B:
        // distinct within-stratum labelings C(5,3)·C(5,2) = 100 (the count is the product
        // over strata: docs/methods.md, "Permutation schemes and p-values"); brute force
        // over those 100 gives the exact p.
        let (d, g) = toy();
        let strata = vec![0, 0, 0, 1, 1, 0, 0, 1, 1, 1];
        let r = permanova_oneway(
            &d,
            &g,
            &opts(999, Scheme::WithinStrata(strata.clone())),
            None,
        )
        .unwrap();
        assert!(r.exact);
        assert_eq!(r.permutations, 100);
        let s0: Vec<usize> = (0..10).filter(|&i| strata[i] == 0).collect();
        let s1: Vec<usize> = (0..10).filter(|&i| strata[i] == 1).collect();
        let f_of = |ina: &[bool]| {
            let lab: Vec<&str> = ina.iter().map(|&a| if a { "A" } else { "B" }).collect();
            let rr = permanova_oneway(
                &d,
                &Grouping::from_labels(&lab),
                &opts(1, Scheme::Free),
                None,
            )
            .unwrap();
            rr.terms[0].pseudo_f
        };
        let mut count = 0;
        for m0 in 0u32..32 {
            for m1 in 0u32..32 {
                if m0.count_ones() != 3 || m1.count_ones() != 2 {
                    continue;
                }
                let mut ina = vec![false; 10];
                for (b, &i) in s0.iter().enumerate() {
                    ina[i] = m0 & (1 << b) != 0;
                }
                for (b, &i) in s1.iter().enumerate() {
                    ina[i] = m1 & (1 << b) != 0;
                }
                if f_of(&ina) >= r.terms[0].pseudo_f * (1.0 - 1e-9) {
                    count += 1;
                }
            }
        }
        assert!((r.terms[0].p_value - count as f64 / 100.0).abs() < 1e-12);
    }

    #[test]
    fn shape_only_distance_finds_shape_not_size() {
        // Simulation with known truth (DEVELOPERS.md, "Rules"): counts ~ Poisson(s · mu_gj)
        // with a lognormal sample factor s. Pure size: B's means are twice A's (same
        // composition); pure shape: same total, reversed composition. Hellinger distance
        // depends only on profiles (docs/methods.md, "Transformations"), so PERMANOVA on
        // it must reject for shape and not (beyond α) for size.
        use crate::analysis::size_test::tests::poisson;
        use rand::RngExt;
        let comp_a = [20.0, 10.0, 8.0, 5.0, 3.0, 2.0, 1.0, 1.0];
        let comp_b = [1.0, 1.0, 2.0, 3.0, 5.0, 8.0, 10.0, 20.0];
        let doubled = comp_a.map(|m| 2.0 * m);
        let hellinger = |rows: &[Vec<f64>]| {
            let h: Vec<Vec<f64>> = rows
                .iter()
                .map(|r| {
                    let t: f64 = r.iter().sum();
                    r.iter().map(|v| (v / t).sqrt()).collect()
                })
                .collect();
            DistanceMatrix::from_fn(h.len(), |i, k| {
                h[i].iter()
                    .zip(&h[k])
                    .map(|(a, b)| (a - b).powi(2))
                    .sum::<f64>()
                    .sqrt()
            })
            .unwrap()
        };
        let g = Grouping::from_codes(&(0..16).map(|i| i / 8).collect::<Vec<_>>());
        let mut rng = permutation::block_rng(123, 0);
        let mut sim = |mu: [&[f64; 8]; 2]| -> Vec<Vec<f64>> {
            (0..16)
                .map(|i| {
                    let z: f64 = (0..12).map(|_| rng.random::<f64>()).sum::<f64>() - 6.0;
                    let s = (0.3 * z).exp();
                    mu[i / 8]
                        .iter()
                        .map(|&m| poisson(&mut rng, m * s))
                        .collect()
                })
                .collect()
        };
        let reps = 200;
        let (mut rej_size, mut rej_shape) = (0, 0);
        for r in 0..reps {
            let o = PermanovaOptions {
                seed: r,
                ..opts(199, Scheme::Free)
            };
            if permanova_oneway(&hellinger(&sim([&comp_a, &doubled])), &g, &o, None)
                .unwrap()
                .terms[0]
                .p_value
                <= 0.05
            {
                rej_size += 1;
            }
            if permanova_oneway(&hellinger(&sim([&comp_a, &comp_b])), &g, &o, None)
                .unwrap()
                .terms[0]
                .p_value
                <= 0.05
            {
                rej_shape += 1;
            }
        }
        // Null (size only): rejections ≤ Binomial(200, 0.05) 0.999 quantile = 21
        // (scipy.stats.binom.ppf(0.999, 200, 0.05)).
        assert!(rej_size <= 21, "pure size: {rej_size}/200");
        // The reversed composition is an enormous effect (profiles nearly disjoint in
        // weight); any power below 0.99 would be a defect, and 195/200 is then failed
        // with probability binom.cdf(194, 200, 0.99) < 0.02.
        assert!(rej_shape >= 195, "pure shape: {rej_shape}/200");
    }

    #[test]
    fn whole_blocks_enumerate_block_labelings() {
        // Between-block factor (Anderson & ter Braak 2003;
        // docs/methods.md, "Permutation schemes and p-values"): blocks {0,1},{2,3} are A
        // and {4,5},{6,7} are B; whole-block permutation gives C(4,2) = 6 distinct
        // labelings, checked here against a brute force over the 6 choices of two A blocks.
        let rows: Vec<Vec<f64>> = TOY[..8].iter().map(|r| r.to_vec()).collect();
        let d = bray_curtis(&rows);
        let blocks = vec![0, 0, 1, 1, 2, 2, 3, 3];
        let lab = |a_blocks: [usize; 2]| -> Grouping {
            let l: Vec<&str> = blocks
                .iter()
                .map(|b| if a_blocks.contains(b) { "A" } else { "B" })
                .collect();
            Grouping::from_labels(&l)
        };
        let r = permanova_oneway(
            &d,
            &lab([0, 1]),
            &opts(999, Scheme::WholeBlocks(blocks.clone())),
            None,
        )
        .unwrap();
        assert!(r.exact);
        assert_eq!(r.permutations, 6);
        let obs = r.terms[0].pseudo_f;
        let mut count = 0;
        for x in 0..4 {
            for y in (x + 1)..4 {
                let f = permanova_oneway(&d, &lab([x, y]), &opts(1, Scheme::Free), None)
                    .unwrap()
                    .terms[0]
                    .pseudo_f;
                if f >= obs * (1.0 - 1e-9) {
                    count += 1;
                }
            }
        }
        assert!((r.terms[0].p_value - count as f64 / 6.0).abs() < 1e-12);
    }

    #[test]
    fn errors() {
        let (d, _) = toy();
        let one = Grouping::from_labels(&["a"; 10]);
        assert_eq!(
            permanova_oneway(&d, &one, &opts(9, Scheme::Free), None).err(),
            Some(AnalysisError::TooFewGroups { found: 1, min: 2 })
        );
    }

    fn euclidean(rows: &[Vec<f64>]) -> DistanceMatrix {
        DistanceMatrix::from_fn(rows.len(), |i, k| {
            rows[i]
                .iter()
                .zip(&rows[k])
                .map(|(a, b)| (a - b).powi(2))
                .sum::<f64>()
                .sqrt()
        })
        .unwrap()
    }

    #[test]
    fn whole_sites_enumerate_site_relabellings_as_numpy_does() {
        // tests/reference/designs.json, "whole_sites": 3 + 3 sites visited 2–5 times,
        // the pseudo-F of all C(6,3) = 20 relabellings of the sites written out in
        // NumPy (itertools.combinations), exact p = #{F* >= F} / 20.
        let fx: serde_json::Value =
            serde_json::from_str(include_str!("../../tests/reference/designs.json")).unwrap();
        let w = &fx["whole_sites"];
        let sites: Vec<usize> = w["sites"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_u64().unwrap() as usize)
            .collect();
        let roles: Vec<String> = w["roles"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_str().unwrap().to_string())
            .collect();
        let x: Vec<Vec<f64>> = w["x"]
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
        let labels: Vec<&str> = sites.iter().map(|&s| roles[s].as_str()).collect();
        let g = Grouping::from_labels(&labels);
        let d = euclidean(&x);
        let r =
            permanova_oneway(&d, &g, &opts(999, Scheme::WholeSites(sites.clone())), None).unwrap();
        let t = &r.terms[0];
        assert!(t.exact);
        assert_eq!(t.permutations, 20);
        let f_obs = w["observed_f"].as_f64().unwrap();
        assert!((t.pseudo_f - f_obs).abs() <= 1e-9 * f_obs);
        assert!((t.p_value - w["p_value"].as_f64().unwrap()).abs() < 1e-12);
        // 3 + 3 sites: every relabelling has its mirror, so p >= 2/20.
        assert!((t.min_p - 2.0 / 20.0).abs() < 1e-15);
        // Every permuted F, not only the count: the enumeration is the NumPy set.
        let permuter = Permuter::new(d.n(), &Scheme::WholeSites(sites), Some(g.codes())).unwrap();
        let all = permuter.enumerate();
        let k = OneWay::new(&d, &g);
        let mut fs = vec![0.0; all.len()];
        k.f_batch(&all.concat(), &mut fs);
        fs.sort_by(f64::total_cmp);
        let expect: Vec<f64> = w["permuted_f_sorted"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_f64().unwrap())
            .collect();
        assert_eq!(fs.len(), expect.len());
        for (a, b) in fs.iter().zip(&expect) {
            assert!((a - b).abs() <= 1e-9 * b.abs().max(1.0), "{a} vs {b}");
        }
    }

    #[test]
    fn site_level_factor_without_effect_rejects_at_alpha_only_under_whole_sites() {
        // 100 simulated programs: 10 sites (5 + 5 under a site-level factor with no
        // effect), 6 visits each, strong site-to-site differences. Whole-site
        // permutation rejects at p <= 0.05 in at most 13 of 100 (0.999 quantile of
        // Binomial(100, 0.05): scipy.stats.binom.ppf, tests/reference/designs.json);
        // free permutation of the 60 rows treats visits as replicates and rejects far
        // more often (the reason `--permute auto` moves whole sites).
        let fx: serde_json::Value =
            serde_json::from_str(include_str!("../../tests/reference/designs.json")).unwrap();
        let upper = fx["binomial"]["upper_0999"].as_f64().unwrap() as usize;
        let (n_sites, visits) = (10, 6);
        let sites: Vec<usize> = (0..n_sites * visits).map(|i| i / visits).collect();
        let labels: Vec<&str> = sites
            .iter()
            .map(|&s| if s < n_sites / 2 { "fenced" } else { "open" })
            .collect();
        let g = Grouping::from_labels(&labels);
        let (mut whole, mut free) = (0, 0);
        for sim in 0..100u64 {
            let mut rng = crate::analysis::permutation::block_rng(900 + sim, 0);
            let mut normal = || {
                // Box–Muller from two uniform draws.
                let u1 = (rand::Rng::next_u64(&mut rng) as f64 + 1.0) / (u64::MAX as f64 + 2.0);
                let u2 = (rand::Rng::next_u64(&mut rng) as f64) / (u64::MAX as f64);
                (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
            };
            let site_mean: Vec<[f64; 2]> = (0..n_sites)
                .map(|_| [2.0 * normal(), 2.0 * normal()])
                .collect();
            let x: Vec<Vec<f64>> = sites
                .iter()
                .map(|&s| vec![site_mean[s][0] + normal(), site_mean[s][1] + normal()])
                .collect();
            let d = euclidean(&x);
            let mut o = opts(99, Scheme::WholeSites(sites.clone()));
            o.seed = sim;
            if permanova_oneway(&d, &g, &o, None).unwrap().terms[0].p_value <= 0.05 {
                whole += 1;
            }
            o.scheme = Scheme::Free;
            if permanova_oneway(&d, &g, &o, None).unwrap().terms[0].p_value <= 0.05 {
                free += 1;
            }
        }
        assert!(whole <= upper, "whole sites rejected {whole} of 100");
        assert!(
            free > 3 * upper,
            "free permutation rejected only {free} of 100"
        );
    }
}
