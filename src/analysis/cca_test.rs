//! Permutation test of the constraints of a canonical correspondence analysis
//! (ter Braak 1986, Ecology 67:1167-1179; docs/methods.md, "CA and CCA in matrix form").
//!
//! Owns the test statistic and its batch evaluation only; the CCA itself is
//! `ordination::cca`. The statistic is the pseudo-F
//! `(constrained / q) / (unconstrained / (n − q − 1))`. Under the null
//! hypothesis the rows of the environmental matrix `Z` are exchangeable
//! relative to the rows of the count table `Y`; each permutation moves the rows
//! of `Z`, keeps the row masses `r` with the rows of `Y`, and therefore redoes
//! the weighted centring of the permuted `Z` with those masses (ter Braak 1986,
//! Ecology 67:1167-1179; Legendre & Legendre 2012, *Numerical Ecology* 3rd ed.,
//! ch. 11). The total inertia does not change under permutation, so the
//! pseudo-F is a monotone function of the constrained inertia.

use nalgebra::{DMatrix, SymmetricEigen};
use serde::Serialize;

use super::error::AnalysisError;
use super::ordination::cca;
use super::permutation::{
    PermutationOptions, PermutationResult, Permuter, Progress, Scheme, permutation_test,
};
use super::prec::RANK_TOL;

/// Result of the permutation test of the CCA constraints.
#[derive(Debug, Clone, Serialize)]
pub struct CcaTest {
    /// Number of samples.
    pub n: usize,
    /// Constraint degrees of freedom (rank of the weighted-centred `Z`).
    pub rank: usize,
    /// Total inertia of the table.
    pub total_inertia: f64,
    /// Constrained inertia of the observed arrangement.
    pub constrained_inertia: f64,
    /// Unconstrained (residual) inertia of the observed arrangement.
    pub unconstrained_inertia: f64,
    /// Observed pseudo-F.
    pub pseudo_f: f64,
    /// The permutation test of the pseudo-F.
    pub permutation: PermutationResult,
}

/// Standardised residuals `S` and row masses `r` of a count table (as in CA).
fn residuals(y: &DMatrix<f64>) -> (DMatrix<f64>, Vec<f64>) {
    let total = y.sum();
    let (n, p) = y.shape();
    let r: Vec<f64> = (0..n).map(|i| y.row(i).sum() / total).collect();
    let c: Vec<f64> = (0..p).map(|j| y.column(j).sum() / total).collect();
    let s = DMatrix::from_fn(n, p, |i, j| {
        let e = r[i] * c[j];
        (y[(i, j)] / total - e) / e.sqrt()
    });
    (s, r)
}

/// Constrained inertia `‖P_w S‖²` when row `i` of the environment is row
/// `perm[i]` of `z`: weighted centring of the permuted `z` by `r`, then the
/// projection `tr(A' M⁺ A)` with `Z_w = D_r^{1/2} Z_c`, `A = Z_w' S`,
/// `M = Z_w' Z_w` (pseudo-inverse through the eigen-decomposition of the q × q
/// matrix `M`, eigenvalues below `RANK_TOL² · λ_max` treated as zero).
pub(crate) fn constrained_inertia(
    s: &DMatrix<f64>,
    r: &[f64],
    z: &DMatrix<f64>,
    perm: &[usize],
) -> f64 {
    let (n, q) = z.shape();
    let mut zw = DMatrix::zeros(n, q);
    for j in 0..q {
        let mean: f64 = (0..n).map(|i| r[i] * z[(perm[i], j)]).sum();
        for i in 0..n {
            zw[(i, j)] = r[i].sqrt() * (z[(perm[i], j)] - mean);
        }
    }
    let a = zw.transpose() * s;
    let m = zw.transpose() * &zw;
    let eig = SymmetricEigen::new(m);
    let top = eig.eigenvalues.iter().cloned().fold(0.0_f64, f64::max);
    let mut fitted = 0.0;
    for k in 0..q {
        let l = eig.eigenvalues[k];
        if top > 0.0 && l > RANK_TOL * RANK_TOL * top {
            let proj = eig.eigenvectors.column(k).transpose() * &a;
            fitted += proj.norm_squared() / l;
        }
    }
    fitted
}

/// Permutation test of the constraints `z` (n × q: covariates and dummy
/// columns) of the CCA of `y` (n × p counts), by free permutation of the rows
/// of `z` (see the module notes). Seeded and deterministic on any number of
/// threads ([`permutation_test`]).
///
/// # Errors
/// As [`cca`] (bad tables, constant or saturating constraints);
/// [`AnalysisError::InvalidArgument`] when `opts.permutations` is 0 or the
/// constraints explain nothing or everything (no pseudo-F).
pub fn cca_permutation_test(
    y: &DMatrix<f64>,
    z: &DMatrix<f64>,
    opts: &PermutationOptions,
    progress: Option<Progress<'_>>,
) -> Result<CcaTest, AnalysisError> {
    let fit = cca(y, z)?;
    let pseudo_f = fit
        .pseudo_f()
        .ok_or_else(|| AnalysisError::InvalidArgument {
            name: "constraints",
            reason: "the constraints leave no residual inertia; no test is possible".into(),
        })?;
    let (s, r) = residuals(y);
    let n = fit.n;
    let q = fit.constraint_rank as f64;
    let total = fit.total_inertia;
    let df_resid = (n - fit.constraint_rank - 1) as f64;
    let f_of = |c: f64| {
        let u = (total - c).max(0.0);
        if u > 0.0 {
            (c / q) / (u / df_resid)
        } else {
            f64::INFINITY
        }
    };
    let permuter = Permuter::new(n, &Scheme::Free, None)?;
    let stat = |perms: &[usize], out: &mut [f64]| {
        for (k, perm) in perms.chunks(n).enumerate() {
            out[k] = f_of(constrained_inertia(&s, &r, z, perm));
        }
    };
    let permutation = permutation_test(&permuter, pseudo_f, opts, &stat, progress)?;
    Ok(CcaTest {
        n,
        rank: fit.constraint_rank,
        total_inertia: total,
        constrained_inertia: fit.constrained_inertia,
        unconstrained_inertia: fit.unconstrained_inertia,
        pseudo_f,
        permutation,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

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
    fn identity_statistic_matches_worked_example_and_kernel() {
        let y = toy();
        let t: Vec<f64> = (0..10).map(|i| y.row(i).sum()).collect();
        let z = DMatrix::from_fn(10, 1, |i, _| t[i].ln());
        let (s, r) = residuals(&y);
        let id: Vec<usize> = (0..10).collect();
        let c = constrained_inertia(&s, &r, &z, &id);
        // docs/methods.md, "The toy community": E = ln(t), constrained inertia 0.0352998
        // (NumPy weighted least squares, also in tests/reference/ordination.json).
        assert!((c - 0.0352998).abs() < 5e-8, "{c}");
        // The projection route agrees with the SVD route of ordination::cca.
        let fit = cca(&y, &z).unwrap();
        assert_relative_eq!(c, fit.constrained_inertia, max_relative = 1e-10);
    }

    #[test]
    fn exact_p_value_equals_brute_force_over_all_permutations() {
        // 6 samples: 720 arrangements, all enumerated by the permuter; compared with
        // counting by refitting ordination::cca on every permuted Z (exact enumeration).
        let y = DMatrix::from_row_slice(
            6,
            4,
            &[
                20., 5., 3., 1., 15., 8., 2., 2., 9., 9., 6., 3., 4., 12., 8., 6., 2., 6., 14., 9.,
                1., 3., 10., 15.,
            ],
        );
        let z = DMatrix::from_column_slice(6, 2, &[1., 2., 3., 4., 5., 6., 0., 1., 0., 1., 1., 0.]);
        let opts = PermutationOptions {
            permutations: 999,
            seed: 7,
        };
        let test = cca_permutation_test(&y, &z, &opts, None).unwrap();
        assert!(test.permutation.exact);
        assert_eq!(test.permutation.permutations, 720);
        let observed = cca(&y, &z).unwrap().pseudo_f().unwrap();
        let mut perm: Vec<usize> = (0..6).collect();
        let mut all = Vec::new();
        heap_permutations(6, &mut perm, &mut all);
        assert_eq!(all.len(), 720);
        let mut distinct = all.clone();
        distinct.sort();
        distinct.dedup();
        assert_eq!(distinct.len(), 720);
        let hits = all
            .iter()
            .filter(|p| {
                let zp = DMatrix::from_fn(6, 2, |i, j| z[(p[i], j)]);
                let f = cca(&y, &zp).unwrap().pseudo_f().unwrap();
                f >= observed * (1.0 - 1e-9)
            })
            .count();
        assert_relative_eq!(
            test.permutation.p_value,
            hits as f64 / 720.0,
            epsilon = 1e-12
        );
        assert_relative_eq!(test.pseudo_f, observed, max_relative = 1e-12);
    }

    /// Heap's algorithm: every permutation of `v[..k]`.
    fn heap_permutations(k: usize, v: &mut Vec<usize>, out: &mut Vec<Vec<usize>>) {
        if k == 1 {
            out.push(v.clone());
            return;
        }
        heap_permutations(k - 1, v, out);
        for i in 0..k - 1 {
            if k.is_multiple_of(2) {
                v.swap(i, k - 1);
            } else {
                v.swap(0, k - 1);
            }
            heap_permutations(k - 1, v, out);
        }
    }

    #[test]
    fn seeded_random_test_is_reproducible() {
        let y = toy();
        let z = DMatrix::from_fn(10, 1, |i, _| i as f64);
        let opts = PermutationOptions {
            permutations: 199,
            seed: 42,
        };
        let a = cca_permutation_test(&y, &z, &opts, None).unwrap();
        let b = cca_permutation_test(&y, &z, &opts, None).unwrap();
        assert!(!a.permutation.exact);
        assert_eq!(a.permutation.p_value, b.permutation.p_value);
        assert!(a.permutation.p_value >= a.permutation.min_p);
    }
}
