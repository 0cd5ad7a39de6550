//! The size/shape partition of a dissimilarity (db-RDA variation partitioning).
//!
//! The variation of a dissimilarity matrix D (the trace of its Gower-centred
//! matrix G) is split by two explanatory sets — *size* S (the log, or raw,
//! sample total) and *shape* P (the sample's composition: row profiles, or the
//! leading correspondence-analysis axes of the profile space) — into four
//! parts that sum to the total: size only [a], size and shape together [b],
//! shape only [c], unexplained [d]. Raw fractions are ratios of traces;
//! adjusted fractions apply Ezekiel's adjustment to each of the three fitted
//! models and combine them (Borcard, Legendre & Drapeau 1992, Ecology
//! 73:1045-1055; Peres-Neto et al. 2006, Ecology 87:2614-2625; McArdle &
//! Anderson 2001, Ecology 82:290-297 for traces of G with any D).
//! The size/shape reading of the two sets follows Greenacre (2017, Methods
//! Ecol. Evol. 8:1415-1424). The unique parts are tested with pseudo-F
//! statistics whose permutation distribution is obtained by permuting
//! residuals under the reduced model (Freedman & Lane 1983).

use nalgebra::DMatrix;
use serde::Serialize;

use super::DistanceMatrix;
use super::gower::gower_centre;
use super::linear_model::Basis;
use super::ordination::ca_axes;
use super::permanova::PartialTerm;
use super::permutation::{
    PermutationOptions, PermutationResult, Permuter, Progress, Scheme, permutation_test,
};
use super::transform::{refuse_empty_rows, row_totals};
use super::{AnalysisError, prec};

/// How sample size enters the partition.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, serde::Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum SizeCoding {
    /// Natural log of the sample total (default; the natural size variable of
    /// Bray-Curtis and every coefficient invariant to common rescaling).
    LogTotal,
    /// The raw sample total.
    Total,
}

/// Which shape design to use.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub enum ShapeAxes {
    /// All profile dimensions, unless that leaves fewer than `min_resid_df`
    /// residual degrees of freedom; then the leading CA axes that leave exactly that.
    Auto {
        /// Minimum residual degrees of freedom kept (10 by default).
        min_resid_df: usize,
    },
    /// Exactly this many leading correspondence-analysis axes.
    Fixed(usize),
}

/// The four parts of a partition.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Fractions {
    /// [a]: explained by size and not by shape.
    pub size_only: f64,
    /// [b]: explained by either; cannot be assigned to one of them.
    pub shared: f64,
    /// [c]: explained by shape and not by size.
    pub shape_only: f64,
    /// [d]: explained by neither.
    pub unexplained: f64,
}

/// A pseudo-F test of one unique part, given the other set.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct PartialTest {
    /// Pseudo-F; `None` when the residual variation is zero (one set explains everything).
    pub pseudo_f: Option<f64>,
    /// Numerator degrees of freedom.
    pub df: usize,
    /// Residual degrees of freedom.
    pub df_resid: usize,
}

/// The fitted partition (without permutation p-values).
#[derive(Debug, Clone, Serialize)]
pub struct Partition {
    /// Number of samples.
    pub n: usize,
    /// Total variation tr(G).
    pub total_ss: f64,
    /// R² of size alone, shape alone, both.
    pub r2_size: f64,
    /// R² of the shape design alone.
    pub r2_shape: f64,
    /// R² of size and shape together.
    pub r2_both: f64,
    /// Raw fractions (sum to 1).
    pub fractions: Fractions,
    /// Adjusted fractions (sum to 1; individual parts may be negative).
    pub adjusted_fractions: Fractions,
    /// Test of size given shape.
    pub size_test: PartialTest,
    /// Test of shape given size.
    pub shape_test: PartialTest,
    /// Rank of the shape design beyond the intercept.
    pub shape_df: usize,
    /// Residual degrees of freedom of the full model.
    pub df_resid: usize,
    /// True when one set leaves no residual variation (e.g. chi-square distance
    /// with the full profile space): the partial tests are then not applicable.
    pub exhaustive: bool,
}

/// Ezekiel's adjusted R² for `m` predictor degrees of freedom and `n` samples
/// ([`super::linear_model::adjusted_r2`]), `None` when no residual degree of
/// freedom is left.
pub fn adjusted_r2(r2: f64, n: usize, m: usize) -> Option<f64> {
    (n > m + 1).then(|| super::linear_model::adjusted_r2(r2, n, m))
}

/// The shape design: row profiles (all p columns; the rank-revealing basis
/// removes the one dimension they share with the intercept).
///
/// # Errors
/// [`AnalysisError::EmptySamples`] for rows with no organisms.
pub fn profile_design(y: &DMatrix<f64>) -> Result<DMatrix<f64>, AnalysisError> {
    let totals = row_totals(y);
    refuse_empty_rows(&totals)?;
    Ok(DMatrix::from_fn(y.nrows(), y.ncols(), |i, j| {
        y[(i, j)] / totals[i]
    }))
}

/// The size design: ln(total) or total, one column.
///
/// # Errors
/// [`AnalysisError::EmptySamples`] for rows with no organisms (ln 0 is undefined).
pub fn size_design(y: &DMatrix<f64>, coding: SizeCoding) -> Result<DMatrix<f64>, AnalysisError> {
    let totals = row_totals(y);
    refuse_empty_rows(&totals)?;
    Ok(DMatrix::from_fn(y.nrows(), 1, |i, _| match coding {
        SizeCoding::LogTotal => totals[i].ln(),
        SizeCoding::Total => totals[i],
    }))
}

/// Fit the partition of the centred matrix `g` by the size design `s` and the
/// shape design `p` (designs without the intercept column; it is added).
///
/// # Errors
/// [`AnalysisError::Saturated`] when size and shape together leave no residual
/// degrees of freedom; dimension errors.
pub fn fit(
    g: &DMatrix<f64>,
    s: &DMatrix<f64>,
    p: &DMatrix<f64>,
) -> Result<Partition, AnalysisError> {
    let n = g.nrows();
    for m in [s, p] {
        if m.nrows() != n {
            return Err(AnalysisError::DimensionMismatch {
                expected: n,
                found: m.nrows(),
            });
        }
    }
    let one = Basis::intercept(n);
    let bs = one.extended(s)?;
    let bp = one.extended(p)?;
    let bb = bs.extended(p)?;
    let rank_full = bb.rank();
    if rank_full >= n {
        return Err(AnalysisError::Saturated { rank: rank_full, n });
    }
    let total = g.trace();
    if prec::not_positive(total) {
        return Err(AnalysisError::InvalidArgument {
            name: "dissimilarities",
            reason: "all dissimilarities are zero; there is no variation to partition".into(),
        });
    }
    // The intercept column carries no variation (G 1 = 0), so tr(H G) over the
    // basis including it equals the model sum of squares.
    let ss_s = bs.trace_hg(g);
    let ss_p = bp.trace_hg(g);
    let ss_b = bb.trace_hg(g);
    let (r2s, r2p, r2b) = (ss_s / total, ss_p / total, ss_b / total);
    let (ms, mp, mb) = (bs.rank() - 1, bp.rank() - 1, rank_full - 1);
    let raw = combine(r2s, r2p, r2b);
    let adj = match (
        adjusted_r2(r2s, n, ms),
        adjusted_r2(r2p, n, mp),
        adjusted_r2(r2b, n, mb),
    ) {
        (Some(a), Some(b), Some(c)) => combine(a, b, c),
        _ => return Err(AnalysisError::Saturated { rank: rank_full, n }),
    };
    let df_resid = n - rank_full;
    let ss_res = total - ss_b;
    // Residual variation at rounding level means one set explains everything.
    let exhaustive = ss_res <= 1e-10 * total;
    let partial = |ss_extra: f64, df: usize| PartialTest {
        pseudo_f: (!exhaustive && df > 0)
            .then(|| (ss_extra / df as f64) / (ss_res / df_resid as f64)),
        df,
        df_resid,
    };
    Ok(Partition {
        n,
        total_ss: total,
        r2_size: r2s,
        r2_shape: r2p,
        r2_both: r2b,
        fractions: raw,
        adjusted_fractions: adj,
        size_test: partial(ss_b - ss_p, mb - mp),
        shape_test: partial(ss_b - ss_s, mb - ms),
        shape_df: mp,
        df_resid,
        exhaustive,
    })
}

fn combine(size: f64, shape: f64, both: f64) -> Fractions {
    Fractions {
        size_only: both - shape,
        shared: size + shape - both,
        shape_only: both - size,
        unexplained: 1.0 - both,
    }
}

/// Options of a full partition with tests.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PartitionOptions {
    /// How size enters.
    pub size: SizeCoding,
    /// Which shape design.
    pub shape_axes: ShapeAxes,
    /// Permutations for each unique-part test.
    pub permutations: usize,
    /// Seed of the permutation streams.
    pub seed: u64,
    /// Exchangeability scheme.
    pub scheme: Scheme,
}

/// The shape design actually used.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ShapeDesign {
    /// `profiles` (the whole profile space) or `ca-axes`.
    pub kind: &'static str,
    /// Dimensions of the shape design beyond the intercept.
    pub axes: usize,
    /// Share of the profile (correspondence-analysis) inertia those dimensions carry.
    pub inertia_share: f64,
}

/// Permutation p-values of the two unique parts (`None` when not applicable).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct UniqueTest {
    /// Pseudo-F of the part given the other set; `None` when not applicable.
    pub pseudo_f: Option<f64>,
    /// Permutation p-value; `None` when not applicable.
    pub p_value: Option<f64>,
    /// Numerator degrees of freedom.
    pub df: usize,
    /// Residual degrees of freedom.
    pub df_resid: usize,
    /// Permutations evaluated (0 when not applicable).
    pub permutations: usize,
    /// Whether every distinct permutation was enumerated.
    pub exact: bool,
    /// Smallest p-value this design and number of permutations can give; `None`
    /// when not applicable.
    #[serde(rename = "smallest_possible_p")]
    pub min_p: Option<f64>,
}

/// A partition with its shape design and tests.
#[derive(Debug, Clone, Serialize)]
pub struct PartitionResult {
    /// The fitted fractions and F statistics.
    pub fit: Partition,
    /// The shape design used.
    pub shape: ShapeDesign,
    /// Test of size given shape (Freedman–Lane, residuals of the shape-only model permuted).
    pub size_only: UniqueTest,
    /// Test of shape given size (residuals of the size-only model permuted).
    pub shape_only: UniqueTest,
    /// Seed used.
    pub seed: u64,
    /// Permutation scheme, described.
    pub scheme: String,
    /// Plain-language notes (saturation avoided, exhaustive block, negative fractions…).
    pub notes: Vec<String>,
}

/// Choose the shape design for `y` (counts after any effort standardisation):
/// all profile dimensions, or the leading CA axes (docs/methods.md, "The shape design").
///
/// # Errors
/// [`AnalysisError::Saturated`] when even one shape axis would leave no residual
/// degrees of freedom; errors of [`profile_design`] and [`ca_axes`].
pub fn shape_design(
    y: &DMatrix<f64>,
    axes: ShapeAxes,
) -> Result<(DMatrix<f64>, ShapeDesign), AnalysisError> {
    let n = y.nrows();
    let profiles = profile_design(y)?;
    // Rank of the profile space beyond the intercept: profiles sum to 1 per row.
    let profile_dim = Basis::intercept(n).extended(&profiles)?.rank() - 1;
    let k = match axes {
        ShapeAxes::Fixed(k) => k,
        ShapeAxes::Auto { min_resid_df } => {
            // Full model [1, S, P]: rank 2 + dim; residual df n - 2 - dim.
            let room = n.saturating_sub(2 + min_resid_df);
            if profile_dim <= room {
                return Ok((
                    profiles,
                    ShapeDesign {
                        kind: "profiles",
                        axes: profile_dim,
                        inertia_share: 1.0,
                    },
                ));
            }
            room
        }
    };
    if k == 0 || k + 2 >= n {
        return Err(AnalysisError::Saturated {
            rank: 2 + k.max(1),
            n,
        });
    }
    let ca = ca_axes(y, k)?;
    let used = ca.coords.ncols();
    Ok((
        ca.coords,
        ShapeDesign {
            kind: "ca-axes",
            axes: used,
            inertia_share: ca.share,
        },
    ))
}

/// The size/shape partition of `d` (computed from `y`) with permutation tests of
/// both unique parts.
///
/// # Errors
/// Errors of [`size_design`], [`shape_design`], [`fit`] and the permutation engine.
pub fn partition(
    y: &DMatrix<f64>,
    d: &DistanceMatrix,
    opts: &PartitionOptions,
    progress: Option<Progress<'_>>,
) -> Result<PartitionResult, AnalysisError> {
    let n = y.nrows();
    if d.n() != n {
        return Err(AnalysisError::DimensionMismatch {
            expected: n,
            found: d.n(),
        });
    }
    let s = size_design(y, opts.size)?;
    let (p, shape) = shape_design(y, opts.shape_axes)?;
    let g = gower_centre(d);
    let fitted = fit(&g, &s, &p)?;
    let mut notes = Vec::new();
    if shape.kind == "ca-axes" {
        let why = match opts.shape_axes {
            ShapeAxes::Auto { .. } => {
                "so that size and shape leave enough residual degrees of freedom"
            }
            ShapeAxes::Fixed(_) => "as asked",
        };
        notes.push(format!(
            "shape represented by the {} leading correspondence-analysis axes ({:.1}% of profile inertia), {why}",
            shape.axes,
            100.0 * shape.inertia_share
        ));
    }
    if fitted.df_resid < 10 {
        notes.push(format!(
            "only {} residual degrees of freedom: adjusted fractions are unstable",
            fitted.df_resid
        ));
    }
    let permuter = Permuter::new(n, &opts.scheme, None)?;
    permuter.require_row_moves("the test of a partition fraction")?;
    let popts = PermutationOptions {
        permutations: opts.permutations,
        seed: opts.seed,
    };
    let one = Basis::intercept(n);
    let bs = one.extended(&s)?;
    let bp = one.extended(&p)?;
    let bsp = bs.extended(&p)?;
    let bps = bp.extended(&s)?;
    let run =
        |reduced: &Basis, full: &Basis, t: &PartialTest| -> Result<UniqueTest, AnalysisError> {
            if fitted.exhaustive || t.pseudo_f.is_none() || t.df == 0 {
                return Ok(UniqueTest {
                    pseudo_f: None,
                    p_value: None,
                    df: t.df,
                    df_resid: t.df_resid,
                    permutations: 0,
                    exact: false,
                    min_p: None,
                });
            }
            let term = PartialTerm::new(&g, reduced, full);
            let identity: Vec<usize> = (0..n).collect();
            let mut obs = [0.0];
            term.f_batch(&identity, &mut obs);
            let stat = |perms: &[usize], out: &mut [f64]| term.f_batch(perms, out);
            let r: PermutationResult =
                permutation_test(&permuter, obs[0], &popts, &stat, progress)?;
            Ok(UniqueTest {
                pseudo_f: Some(obs[0]),
                p_value: Some(r.p_value),
                df: t.df,
                df_resid: t.df_resid,
                permutations: r.permutations,
                exact: r.exact,
                min_p: Some(r.min_p),
            })
        };
    let size_only = run(&bp, &bps, &fitted.size_test)?;
    let shape_only = run(&bs, &bsp, &fitted.shape_test)?;
    if fitted.exhaustive {
        notes.push(
            "one set explains the whole dissimilarity (no residual variation): \
             the tests of the unique parts are not applicable"
                .into(),
        );
    }
    let adj = fitted.adjusted_fractions;
    if [adj.size_only, adj.shared, adj.shape_only, adj.unexplained]
        .iter()
        .any(|v| *v < 0.0)
    {
        notes.push(
            "an adjusted fraction is negative: an estimate of a part near zero, reported as computed"
                .into(),
        );
    }
    Ok(PartitionResult {
        fit: fitted,
        shape,
        size_only,
        shape_only,
        seed: opts.seed,
        scheme: permuter.scheme().describe(),
        notes,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::dissimilarity::Distance;
    use crate::analysis::transform::Transform;

    use crate::analysis::prec::test_data::toy;

    fn toy_fit(distance: Distance, transform: Transform) -> Partition {
        let y = toy();
        let x = transform.apply(&y).unwrap();
        let d = distance.compute(&x).unwrap();
        let g = gower_centre(&d);
        let s = size_design(&y, SizeCoding::LogTotal).unwrap();
        let p = profile_design(&y).unwrap();
        fit(&g, &s, &p).unwrap()
    }

    fn close(a: f64, b: f64) -> bool {
        (a - b).abs() < 5e-6
    }

    #[test]
    fn toy_bray_curtis_matches_the_worked_example() {
        // docs/methods.md, "The toy community", Bray-Curtis partition. Values derived
        // from the formulas of docs/methods.md, "The four parts" (computed with NumPy,
        // no publication): R² S 0.124836, P 0.897581, S+P 0.966897;
        // adjusted [a] 0.131134, [b] -0.115694, [c] 0.885251, [d] 0.099310;
        // F(size|shape) = 6.281829 (df 1, 3), F(shape|size) = 15.262491 (df 5, 3).
        let f = toy_fit(Distance::BrayCurtis, Transform::None);
        assert!(close(f.r2_size, 0.124836));
        assert!(close(f.r2_shape, 0.897581));
        assert!(close(f.r2_both, 0.966897));
        let a = f.adjusted_fractions;
        assert!(close(a.size_only, 0.131134), "{a:?}");
        assert!(close(a.shared, -0.115694));
        assert!(close(a.shape_only, 0.885251));
        assert!(close(a.unexplained, 0.099310));
        assert_eq!((f.size_test.df, f.size_test.df_resid), (1, 3));
        assert_eq!((f.shape_test.df, f.shape_test.df_resid), (5, 3));
        assert!(close(f.size_test.pseudo_f.unwrap(), 6.281829));
        assert!(close(f.shape_test.pseudo_f.unwrap(), 15.262491));
        let r = f.fractions;
        assert!((r.size_only + r.shared + r.shape_only + r.unexplained - 1.0).abs() < 1e-12);
    }

    #[test]
    fn toy_hellinger_and_euclidean_rows() {
        // docs/methods.md, "The toy community", Hellinger and raw Euclidean partitions;
        // values derived as above (NumPy, no publication).
        let h = toy_fit(Distance::Hellinger, Transform::None);
        assert!(close(h.r2_shape, 0.980081));
        assert!(close(h.adjusted_fractions.size_only, -0.011373));
        assert!(close(h.adjusted_fractions.shape_only, 1.007688));
        let e = toy_fit(Distance::Euclidean, Transform::None);
        assert!(close(e.r2_size, 0.231555));
        assert!(close(e.adjusted_fractions.size_only, 0.328912));
        assert!(close(e.adjusted_fractions.shared, -0.193413));
    }

    #[test]
    fn chi_square_with_full_profile_space_is_exhaustive() {
        // docs/methods.md, "The shape design" (derived, no publication): chi-square
        // coordinates are linear in the profiles, so R²(shape) = 1 and [a] = 0; the
        // unique-part tests are then not applicable.
        let f = toy_fit(Distance::ChiSquare, Transform::None);
        assert!(close(f.r2_shape, 1.0));
        assert!(f.adjusted_fractions.size_only.abs() < 1e-6);
        assert!(f.exhaustive);
        assert!(f.size_test.pseudo_f.is_none() && f.shape_test.pseudo_f.is_none());
    }

    #[test]
    fn auto_shape_design_falls_back_to_ca_axes_and_refuses_saturation() {
        let y = toy();
        // n = 10, 5 profile dimensions: 10 - 2 - 5 = 3 < 10 residual df, so CA axes
        // are used; with 10 residual df wanted there is no room at all.
        assert!(matches!(
            shape_design(&y, ShapeAxes::Auto { min_resid_df: 10 }),
            Err(AnalysisError::Saturated { .. })
        ));
        let (p, sd) = shape_design(&y, ShapeAxes::Auto { min_resid_df: 5 }).unwrap();
        assert_eq!((sd.kind, sd.axes, p.ncols()), ("ca-axes", 3, 3));
        assert!(sd.inertia_share > 0.9 && sd.inertia_share <= 1.0);
        let (_, full) = shape_design(&y, ShapeAxes::Auto { min_resid_df: 3 }).unwrap();
        assert_eq!((full.kind, full.axes), ("profiles", 5));
    }

    /// Samples sharing one composition up to a small fixed perturbation, with totals
    /// spread over a factor `contrast` (a simulation with known truth: the only
    /// systematic difference between samples is their size).
    fn pure_size(contrast: f64) -> DMatrix<f64> {
        let base = [0.35, 0.25, 0.2, 0.1, 0.06, 0.04];
        let n = 24;
        DMatrix::from_fn(n, 6, |i, j| {
            let wobble = 1.0 + 0.15 * ((i * 7 + j * 13) as f64).sin();
            let total = 200.0 * contrast.powf(i as f64 / (n - 1) as f64);
            base[j] * wobble * total
        })
    }

    fn size_only_part(y: &DMatrix<f64>, distance: Distance) -> f64 {
        let d = distance.compute(y).unwrap();
        let g = gower_centre(&d);
        let s = size_design(y, SizeCoding::LogTotal).unwrap();
        let (p, _) = shape_design(y, ShapeAxes::Auto { min_resid_df: 10 }).unwrap();
        fit(&g, &s, &p).unwrap().adjusted_fractions.size_only
    }

    #[test]
    fn pure_size_differences_show_in_bray_curtis_and_not_in_chi_square() {
        // Greenacre (2017, Methods Ecol. Evol. 8:1415-1424) [abstract]: Bray-Curtis
        // carries size; chi-square compares profiles only
        // (docs/methods.md, "Which dissimilarities carry size").
        let parts: Vec<f64> = [1.05, 1.2, 1.6]
            .iter()
            .map(|c| size_only_part(&pure_size(*c), Distance::BrayCurtis))
            .collect();
        assert!(parts[0] > 0.0, "{parts:?}");
        assert!(parts[0] < parts[1] && parts[1] < parts[2], "{parts:?}");
        for c in [1.2, 9.0] {
            let chi = size_only_part(&pure_size(c), Distance::ChiSquare);
            assert!(chi.abs() < 0.02, "contrast {c}: chi-square size part {chi}");
        }
    }

    /// Multinomial samples from one composition (the only systematic difference
    /// between samples is their total, spread over a factor `contrast`), n = 24.
    fn pure_size_multinomial(contrast: f64, taxa: usize, seed: u64) -> DMatrix<f64> {
        use rand::RngExt;
        let mut rng = crate::analysis::permutation::block_rng(seed, 0);
        let w: Vec<f64> = (0..taxa).map(|j| 1.0 / (1.0 + j as f64)).collect();
        let sum: f64 = w.iter().sum();
        let n = 24;
        let mut y = DMatrix::zeros(n, taxa);
        for i in 0..n {
            let total = (150.0 * contrast.powf(i as f64 / (n - 1) as f64)).round() as usize;
            for _ in 0..total {
                let mut u = rng.random::<f64>() * sum;
                let mut j = 0;
                while j + 1 < taxa && u >= w[j] {
                    u -= w[j];
                    j += 1;
                }
                y[(i, j)] += 1.0;
            }
        }
        y
    }

    #[test]
    fn pure_size_with_multinomial_noise_over_seeds() {
        // Simulation with known truth (one composition, totals spread over a factor
        // c): Bray-Curtis between same-shape samples is tanh(|ln c|/2) (derived in
        // docs/methods.md, "Which dissimilarities carry size"), so its size-only part
        // must be positive and grow with c; the chi-square distance compares profiles
        // only (Greenacre 2017), so with the whole profile space its size-only part is
        // zero by construction (docs/methods.md, "The shape design"),
        // and with CA axes (more taxa than the residual df allow) it stays near zero.
        for seed in 0..5 {
            // Contrasts up to 3: beyond about 5 the part levels off, because
            // tanh(|ln c|/2) saturates and a linear term in ln t captures less of it
            // (seen in this simulation: 0.80 at c = 3, 0.82 at 5, 0.78 at 8).
            let parts: Vec<f64> = [1.1, 1.5, 3.0]
                .iter()
                .map(|c| size_only_part(&pure_size_multinomial(*c, 6, seed), Distance::BrayCurtis))
                .collect();
            assert!(parts[0] > 0.0, "seed {seed}: {parts:?}");
            assert!(
                parts[0] < parts[1] && parts[1] < parts[2],
                "seed {seed}: {parts:?}"
            );
            // At c = 3 Bray-Curtis between the extremes is tanh(ln 3 / 2) = 0.50, far
            // above the multinomial noise of ~150 animals: size dominates.
            assert!(parts[2] > 0.3, "seed {seed}: {parts:?}");
            for c in [1.5, 8.0] {
                let chi = size_only_part(&pure_size_multinomial(c, 6, seed), Distance::ChiSquare);
                assert!(chi.abs() < 1e-6, "seed {seed}, contrast {c}: {chi}");
                // 20 taxa, n = 24: 12 CA axes. The true size-only part is 0; an adjusted
                // fraction of one irrelevant predictor is a small number of either sign.
                // Its scale here is bounded by the unexplained part (a few %), so 0.02
                // would be exceeded only by a size effect.
                let chi20 =
                    size_only_part(&pure_size_multinomial(c, 20, seed), Distance::ChiSquare);
                assert!(
                    chi20.abs() < 0.02,
                    "seed {seed}, contrast {c}, 20 taxa: {chi20}"
                );
            }
        }
    }

    #[test]
    fn unique_parts_are_tested_by_permutation() {
        let y = toy();
        let d = Distance::BrayCurtis.compute(&y).unwrap();
        let opts = PartitionOptions {
            size: SizeCoding::LogTotal,
            shape_axes: ShapeAxes::Auto { min_resid_df: 3 },
            permutations: 199,
            seed: 7,
            scheme: Scheme::Free,
        };
        let r = partition(&y, &d, &opts, None).unwrap();
        let p = r.shape_only.p_value.unwrap();
        assert!(p > 0.0 && p <= 1.0);
        assert_eq!(r.size_only.permutations, 199);
        // Same seed, same p-values.
        let again = partition(&y, &d, &opts, None).unwrap();
        assert_eq!(again.size_only.p_value, r.size_only.p_value);
    }
}
