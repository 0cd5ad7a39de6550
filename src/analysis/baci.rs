//! Before/after × control/impact (BACI): did the impact sites change differently
//! from the control sites? (Green 1979, Sampling Design and Statistical Methods for
//! Environmental Biologists, Wiley; Stewart-Oaten, Murdoch & Parker 1986, Ecology
//! 67:929–940; Underwood 1991, Aust. J. Mar. Freshw. Res. 42:569–587;
//! docs/methods.md, "Before/after × control/impact"). Sites are the replicates of
//! the control/impact contrast, so both tests permute the roles among sites.
//!
//! - **Size** ([`baci_size`]): the log-linear count model
//!   `log μ = log effort + α_site + δ_year + γ · impact · after` (Poisson family,
//!   [`super::count_model`]); year effects absorb swings shared by every site, site
//!   effects the sites' own levels. `exp(γ)` is the ratio of ratios, with a Wald
//!   interval whose standard error is scaled by the Pearson dispersion (so it does
//!   not assume Poisson variance). The test statistic is the score statistic of the
//!   interaction on the model without it (Rao 1948, Proc. Camb. Phil. Soc.
//!   44:50–57), referred to its whole-site permutation distribution.
//! - **Shape** ([`baci_shape`]): in Hellinger space, each site's shift of centroid
//!   from before to after, `z_s = c_after − c_before`; a one-way PERMANOVA of the
//!   shifts by role (Euclidean), sites permuted, and beside it the dispersion test of
//!   the shifts. A shift shared by every site moves all `z_s` alike and is not an
//!   impact.
//!
//! Owns: [`baci_size`], [`baci_shape`], [`BaciSize`], [`BaciShape`].

use super::prec::quantile;
use nalgebra::DMatrix;
use serde::Serialize;

use super::count_model::{ScoreTest, poisson_glm};
use super::dispersion::{DispersionOptions, Permute, dispersion};
use super::linear_model::{Grouping, SsType};
use super::permanova::{PermanovaOptions, permanova_oneway};
use super::permutation::{self, PermutationOptions, Permuter, Scheme};
use super::{AnalysisError, DistanceMatrix};

/// The normal 0.975 quantile (scipy.stats.norm.ppf(0.975)).
const Z_975: f64 = 1.959_963_984_540_054;

/// The rows of a BACI design: one entry per row.
#[derive(Debug, Clone, Copy)]
pub struct BaciRows<'a> {
    /// Site code of each row, 0..S.
    pub site: &'a [usize],
    /// Year code of each row, 0..Y.
    pub year: &'a [usize],
    /// The row is in the after period.
    pub after: &'a [bool],
    /// Per site (indexed by site code): the site is an impact site.
    pub impact: &'a [bool],
}

impl BaciRows<'_> {
    fn check(&self) -> Result<(usize, usize), AnalysisError> {
        let n = self.site.len();
        for len in [self.year.len(), self.after.len()] {
            if len != n {
                return Err(AnalysisError::DimensionMismatch {
                    expected: n,
                    found: len,
                });
            }
        }
        let s = self.site.iter().max().map_or(0, |m| m + 1);
        if self.impact.len() != s {
            return Err(AnalysisError::DimensionMismatch {
                expected: s,
                found: self.impact.len(),
            });
        }
        let n_impact = self.impact.iter().filter(|&&b| b).count();
        if n_impact == 0 || n_impact == s {
            return Err(AnalysisError::InvalidArgument {
                name: "impact",
                reason: "BACI needs at least one impact site and one control site".into(),
            });
        }
        Ok((n, s))
    }

    /// Role code of every row: 1 impact, 0 control.
    fn roles(&self) -> Vec<usize> {
        self.site
            .iter()
            .map(|&s| usize::from(self.impact[s]))
            .collect()
    }
}

/// Options shared by both BACI tests.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BaciOptions {
    /// Random permutations requested (exact enumeration of the relabellings of sites
    /// when they are no more).
    pub permutations: usize,
    /// Generator seed.
    pub seed: u64,
    /// Site-bootstrap resamples of the ratio-of-ratios interval; 0 for the Wald
    /// interval scaled by the Pearson dispersion (runs stored before the bootstrap).
    pub bootstrap: usize,
}

/// The size part of a BACI analysis.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BaciSize {
    /// `exp(γ)`: (impact after/before) ÷ (control after/before).
    pub ratio_of_ratios: f64,
    /// Lower bound of the 95% interval: percentile of the site bootstrap (sites
    /// resampled within role, the model refitted), or Wald scaled by the Pearson
    /// dispersion when `bootstrap` is 0.
    pub ci_low: f64,
    /// Upper bound.
    pub ci_high: f64,
    /// How the interval was obtained.
    pub ci_method: &'static str,
    /// Bootstrap resamples whose model could be fitted (0 for Wald).
    pub bootstrap_fitted: usize,
    /// γ, the interaction coefficient (log scale).
    pub coefficient: f64,
    /// Its standard error scaled by √φ.
    pub std_error: f64,
    /// Pearson dispersion φ of the full model.
    pub dispersion: f64,
    /// Pooled rates Σ count ÷ Σ effort: `[control before, control after, impact
    /// before, impact after]`.
    pub pooled_rates: [f64; 4],
    /// Score statistic of the interaction (observed).
    pub score: f64,
    /// Permutation p-value of the interaction.
    pub p_value: f64,
    /// Exactly enumerated.
    pub exact: bool,
    /// Arrangements used (the observed one included when exact).
    pub permutations: usize,
    /// Smallest p-value this design can give.
    pub smallest_possible_p: f64,
    /// The scheme, described.
    pub scheme: String,
}

/// The design `[1, site, year, interaction]` (treatment coding; codes 0.. with no
/// gaps) of the BACI count model.
fn design(site: &[usize], year: &[usize], inter: &[f64]) -> DMatrix<f64> {
    let n = site.len();
    let s = site.iter().max().map_or(0, |m| m + 1);
    let y_levels = year.iter().max().map_or(0, |m| m + 1);
    let p_r = 1 + (s - 1) + (y_levels - 1);
    let mut x = DMatrix::<f64>::zeros(n, p_r + 1);
    for i in 0..n {
        x[(i, 0)] = 1.0;
        if site[i] > 0 {
            x[(i, site[i])] = 1.0;
        }
        if year[i] > 0 {
            x[(i, s - 1 + year[i])] = 1.0;
        }
        x[(i, p_r)] = inter[i];
    }
    x
}

/// Interaction coefficients γ of `opts.bootstrap` site resamples: the control and
/// the impact sites are each drawn with replacement (as many as there are), every
/// drawn copy keeps its whole series as a site of its own, and the model is
/// refitted. Sites are the replicates of a BACI contrast, so the interval reflects
/// how much the change differs from site to site, not only Poisson-like noise
/// (Stewart-Oaten, Murdoch & Parker 1986). A resample whose model cannot be fitted
/// (for example, drawn impact sites that caught nothing after) is skipped; the
/// count fitted is reported. Seeded (stream [`super::size_test::BOOTSTRAP_STREAM`]).
fn site_bootstrap(
    counts: &[f64],
    effort: &[f64],
    rows: &BaciRows<'_>,
    inter: &[f64],
    opts: &BaciOptions,
) -> Vec<f64> {
    let s = rows.impact.len();
    let mut site_rows = vec![Vec::new(); s];
    for (i, &c) in rows.site.iter().enumerate() {
        site_rows[c].push(i);
    }
    let by_role: [Vec<usize>; 2] = [
        (0..s).filter(|&c| !rows.impact[c]).collect(),
        (0..s).filter(|&c| rows.impact[c]).collect(),
    ];
    let mut rng = permutation::block_rng(opts.seed, super::size_test::BOOTSTRAP_STREAM);
    let mut out = Vec::with_capacity(opts.bootstrap);
    for _ in 0..opts.bootstrap {
        let (mut site, mut year, mut y, mut e, mut x) =
            (Vec::new(), Vec::new(), Vec::new(), Vec::new(), Vec::new());
        let mut copy = 0;
        for group in &by_role {
            for _ in 0..group.len() {
                let c = group[permutation::bounded(&mut rng, group.len() as u64) as usize];
                for &i in &site_rows[c] {
                    site.push(copy);
                    year.push(rows.year[i]);
                    y.push(counts[i]);
                    e.push(effort[i].ln());
                    x.push(inter[i]);
                }
                copy += 1;
            }
        }
        // Years absent from the resample have no column.
        let mut present: Vec<usize> = year.clone();
        present.sort_unstable();
        present.dedup();
        let year: Vec<usize> = year
            .iter()
            .map(|v| present.binary_search(v).expect("invariant: a present year"))
            .collect();
        let d = design(&site, &year, &x);
        if let Ok(fit) = poisson_glm(&y, &d, &e) {
            let g = fit.coefficients[d.ncols() - 1];
            if g.is_finite() {
                out.push(g);
            }
        }
    }
    out
}

/// The size test: the interaction of period and role in the log-linear count model
/// with site and year effects (see the module documentation). `counts` are row totals,
/// `effort` their effort (1 for raw totals). Sites whose every count is zero must be
/// removed by the caller (their site effect has no finite estimate).
///
/// # Errors
/// [`AnalysisError::DimensionMismatch`]; [`AnalysisError::InvalidArgument`] for a
/// design without both roles or with a site that caught nothing; the errors of
/// [`poisson_glm`] (rank-deficient design, non-convergence) and of the permuter.
pub fn baci_size(
    counts: &[f64],
    effort: &[f64],
    rows: BaciRows<'_>,
    opts: &BaciOptions,
) -> Result<BaciSize, AnalysisError> {
    let (n, s) = rows.check()?;
    if counts.len() != n || effort.len() != n {
        return Err(AnalysisError::DimensionMismatch {
            expected: n,
            found: counts.len().min(effort.len()),
        });
    }
    for site in 0..s {
        if (0..n).all(|i| rows.site[i] != site || counts[i] == 0.0) {
            return Err(AnalysisError::InvalidArgument {
                name: "counts",
                reason: format!("site {site} caught nothing: leave it out of the model"),
            });
        }
    }
    let roles = rows.roles();
    let inter: Vec<f64> = (0..n)
        .map(|i| f64::from(u8::from(roles[i] == 1 && rows.after[i])))
        .collect();
    let x = design(rows.site, rows.year, &inter);
    let p_r = x.ncols() - 1;
    let offset: Vec<f64> = effort.iter().map(|e| e.ln()).collect();
    let full = poisson_glm(counts, &x, &offset)?;
    let reduced_x = x.columns(0, p_r).into_owned();
    let reduced = poisson_glm(counts, &reduced_x, &offset)?;
    let score = ScoreTest::new(counts, &reduced_x, &reduced);
    let interaction = |r: &dyn Fn(usize) -> usize| -> Vec<f64> {
        (0..n)
            .map(|i| f64::from(u8::from(r(i) == 1 && rows.after[i])))
            .collect()
    };
    let observed = score.statistic(&interaction(&|i| roles[i]));
    let permuter = Permuter::new(n, &Scheme::WholeSites(rows.site.to_vec()), Some(&roles))?;
    let stat = |perms: &[usize], out: &mut [f64]| {
        for (p, o) in perms.chunks(n).zip(out.iter_mut()) {
            *o = score.statistic(&interaction(&|i| roles[p[i]]));
        }
    };
    let res = permutation::permutation_test(
        &permuter,
        observed,
        &PermutationOptions {
            permutations: opts.permutations,
            seed: opts.seed,
        },
        &stat,
        None,
    )?;
    let gamma = full.coefficients[p_r];
    let se = full.scaled_std_errors()[p_r];
    let (ci_low, ci_high, ci_method, bootstrap_fitted) = if opts.bootstrap == 0 {
        (
            (gamma - Z_975 * se).exp(),
            (gamma + Z_975 * se).exp(),
            "Wald, standard error scaled by the Pearson dispersion",
            0,
        )
    } else {
        let mut g = site_bootstrap(counts, effort, &rows, &inter, opts);
        if g.is_empty() {
            return Err(AnalysisError::InvalidArgument {
                name: "bootstrap",
                reason: "no site resample could be fitted (too few sites that caught anything)"
                    .into(),
            });
        }
        g.sort_by(f64::total_cmp);
        (
            quantile(&g, 0.025).exp(),
            quantile(&g, 0.975).exp(),
            "2.5 and 97.5 % points of the ratio of ratios refitted to site resamples (sites drawn with replacement within role)",
            g.len(),
        )
    };
    let mut sums = [[0.0f64; 2]; 4];
    for i in 0..n {
        let k = 2 * roles[i] + usize::from(rows.after[i]);
        sums[k][0] += counts[i];
        sums[k][1] += effort[i];
    }
    Ok(BaciSize {
        ratio_of_ratios: gamma.exp(),
        ci_low,
        ci_high,
        ci_method,
        bootstrap_fitted,
        coefficient: gamma,
        std_error: se,
        dispersion: full.dispersion(),
        pooled_rates: sums.map(|[c, e]| c / e),
        score: observed,
        p_value: res.p_value,
        exact: res.exact,
        permutations: res.permutations,
        smallest_possible_p: res.min_p,
        scheme: res.scheme,
    })
}

/// The shape part of a BACI analysis.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BaciShape {
    /// Pseudo-F of the one-way PERMANOVA of the sites' centroid shifts by role.
    pub pseudo_f: f64,
    /// Its R².
    pub r2: f64,
    /// Permutation p-value.
    pub p_value: f64,
    /// Exactly enumerated.
    pub exact: bool,
    /// Arrangements used.
    pub permutations: usize,
    /// Smallest p-value this design can give.
    pub smallest_possible_p: f64,
    /// Mean length of the centroid shift: `[control, impact]`.
    pub mean_shift: [f64; 2],
    /// Dispersion F of the shifts by role.
    pub dispersion_f: f64,
    /// Dispersion p-value.
    pub dispersion_p_value: f64,
    /// Dispersion arrangements used.
    pub dispersion_permutations: usize,
}

/// The shape test: one-way PERMANOVA (Euclidean) of each site's centroid shift
/// `z_s = c_after − c_before` in the space of `profiles` (Hellinger-transformed rows,
/// one per row of `rows`), by role, with the dispersion test of the shifts beside it.
/// Every site needs rows before and after.
///
/// # Errors
/// [`AnalysisError::DimensionMismatch`]; [`AnalysisError::InvalidArgument`] for a
/// site without rows in one period or a design without both roles; the errors of
/// PERMANOVA and the dispersion test (for example two sites only: no residual).
pub fn baci_shape(
    profiles: &DMatrix<f64>,
    rows: BaciRows<'_>,
    opts: &BaciOptions,
) -> Result<BaciShape, AnalysisError> {
    let (n, s) = rows.check()?;
    if profiles.nrows() != n {
        return Err(AnalysisError::DimensionMismatch {
            expected: n,
            found: profiles.nrows(),
        });
    }
    let p = profiles.ncols();
    let mut sums = vec![vec![0.0; p]; 2 * s];
    let mut counts = vec![0usize; 2 * s];
    for i in 0..n {
        let k = 2 * rows.site[i] + usize::from(rows.after[i]);
        counts[k] += 1;
        for j in 0..p {
            sums[k][j] += profiles[(i, j)];
        }
    }
    if let Some(k) = counts.iter().position(|&c| c == 0) {
        return Err(AnalysisError::InvalidArgument {
            name: "rows",
            reason: format!(
                "site {} has no rows {} the change",
                k / 2,
                if k % 2 == 0 { "before" } else { "after" }
            ),
        });
    }
    let shifts: Vec<Vec<f64>> = (0..s)
        .map(|site| {
            let (b, a) = (2 * site, 2 * site + 1);
            (0..p)
                .map(|j| sums[a][j] / counts[a] as f64 - sums[b][j] / counts[b] as f64)
                .collect()
        })
        .collect();
    let d = DistanceMatrix::from_fn(s, |i, k| {
        shifts[i]
            .iter()
            .zip(&shifts[k])
            .map(|(u, v)| (u - v).powi(2))
            .sum::<f64>()
            .sqrt()
    })?;
    let labels: Vec<&str> = rows
        .impact
        .iter()
        .map(|&b| if b { "impact" } else { "control" })
        .collect();
    let g = Grouping::from_labels(&labels);
    let perm = permanova_oneway(
        &d,
        &g,
        &PermanovaOptions {
            permutations: opts.permutations,
            seed: opts.seed,
            scheme: Scheme::Free,
            ss_type: SsType::Sequential,
        },
        None,
    )?;
    let disp = dispersion(
        &d,
        &g,
        &DispersionOptions {
            permutations: opts.permutations,
            seed: opts.seed,
            scheme: Scheme::Free,
            permute: Permute::Residuals,
        },
        None,
    )?;
    let mut mean_shift = [0.0; 2];
    let mut k = [0usize; 2];
    for (site, z) in shifts.iter().enumerate() {
        let r = usize::from(rows.impact[site]);
        mean_shift[r] += z.iter().map(|v| v * v).sum::<f64>().sqrt();
        k[r] += 1;
    }
    let t = &perm.terms[0];
    Ok(BaciShape {
        pseudo_f: t.pseudo_f,
        r2: t.r2,
        p_value: t.p_value,
        exact: t.exact,
        permutations: t.permutations,
        smallest_possible_p: t.min_p,
        mean_shift: [mean_shift[0] / k[0] as f64, mean_shift[1] / k[1] as f64],
        dispersion_f: disp.f,
        dispersion_p_value: disp.p_value,
        dispersion_permutations: disp.permutations,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::permutation::block_rng;
    use crate::analysis::size_test::tests::poisson;
    use rand::RngExt;

    /// 4 control + 4 impact sites, 4 years before and 4 after, year swings shared by
    /// every site (×0.5 to ×2), site levels, 6 taxa. `size` multiplies the impact
    /// sites' counts after the change; `shape` moves a share of their animals from
    /// the first taxa to the last; `shared` does both to every site.
    #[allow(clippy::type_complexity, clippy::needless_range_loop)]
    fn program(
        seed: u64,
        size: f64,
        shape: bool,
        shared: bool,
    ) -> (Vec<f64>, DMatrix<f64>, Vec<usize>, Vec<usize>, Vec<bool>) {
        let mut rng = block_rng(seed, 0);
        let (sites, years, taxa) = (8, 8, 6);
        let swing: Vec<f64> = (0..years)
            .map(|_| 2f64.powf(rng.random::<f64>() * 2.0 - 1.0))
            .collect();
        let level: Vec<f64> = (0..sites)
            .map(|_| 2f64.powf(rng.random::<f64>() - 0.5))
            .collect();
        let base = [8.0, 6.0, 4.0, 3.0, 2.0, 1.0];
        let mut y = DMatrix::<f64>::zeros(sites * years, taxa);
        let (mut site, mut year, mut after) = (Vec::new(), Vec::new(), Vec::new());
        for s in 0..sites {
            for t in 0..years {
                let i = s * years + t;
                let (imp, aft) = (s >= 4, t >= 4);
                let touched = aft && (imp || shared);
                for j in 0..taxa {
                    let mut mu = base[j] * swing[t] * level[s];
                    if touched {
                        mu *= size;
                        if shape {
                            mu *= if j < 3 { 0.3 } else { 3.0 };
                        }
                    }
                    y[(i, j)] = poisson(&mut rng, mu);
                }
                site.push(s);
                year.push(t);
                after.push(aft);
            }
        }
        let totals = (0..y.nrows()).map(|i| y.row(i).sum()).collect();
        (totals, y, site, year, after)
    }

    #[test]
    fn site_bootstrap_widens_when_sites_change_differently() {
        // Simulated: 8 sites x 8 years, large counts, the four impact sites change by
        // x0.25, x0.5, x1 and x2 after year 4 (site-to-site heterogeneity of the
        // change). The Wald interval only sees the Poisson-like noise of the rows;
        // the site bootstrap sees the sites disagree (Stewart-Oaten et al. 1986).
        let mut rng = block_rng(5, 0);
        let change = [0.25, 0.5, 1.0, 2.0];
        let (mut t, mut site, mut year, mut after) = (vec![], vec![], vec![], vec![]);
        for s in 0..8usize {
            for yr in 0..8usize {
                let mut mu = 200.0 * (1.0 + 0.1 * s as f64);
                if s >= 4 && yr >= 4 {
                    mu *= change[s - 4];
                }
                t.push(poisson(&mut rng, mu));
                site.push(s);
                year.push(yr);
                after.push(yr >= 4);
            }
        }
        let impact: Vec<bool> = (0..8).map(|s| s >= 4).collect();
        let rows = BaciRows {
            site: &site,
            year: &year,
            after: &after,
            impact: &impact,
        };
        let e = vec![1.0; t.len()];
        let mut opts = BaciOptions {
            permutations: 69,
            seed: 2,
            bootstrap: 0,
        };
        let wald = baci_size(&t, &e, rows, &opts).unwrap();
        opts.bootstrap = 199;
        let boot = baci_size(&t, &e, rows, &opts).unwrap();
        assert_eq!(boot.ratio_of_ratios, wald.ratio_of_ratios);
        assert_eq!(boot.bootstrap_fitted, 199);
        let width = |b: &BaciSize| (b.ci_high / b.ci_low).ln();
        assert!(
            width(&boot) > 2.0 * width(&wald),
            "bootstrap {}-{}, Wald {}-{}",
            boot.ci_low,
            boot.ci_high,
            wald.ci_low,
            wald.ci_high
        );
        assert!(boot.ci_low < boot.ratio_of_ratios && boot.ratio_of_ratios < boot.ci_high);
        // Seeded: the same seed gives the same interval.
        let again = baci_size(&t, &e, rows, &opts).unwrap();
        assert_eq!((again.ci_low, again.ci_high), (boot.ci_low, boot.ci_high));
    }

    fn verdict(seed: u64, size: f64, shape: bool, shared: bool) -> (f64, f64) {
        let (t, y, site, year, after) = program(seed, size, shape, shared);
        let impact: Vec<bool> = (0..8).map(|s| s >= 4).collect();
        let rows = BaciRows {
            site: &site,
            year: &year,
            after: &after,
            impact: &impact,
        };
        let opts = BaciOptions {
            permutations: 999,
            seed,
            bootstrap: 0,
        };
        let e = vec![1.0; t.len()];
        let sz = baci_size(&t, &e, rows, &opts).unwrap();
        let h = crate::analysis::Transform::Hellinger.apply(&y).unwrap();
        let sh = baci_shape(&h, rows, &opts).unwrap();
        // 4 + 4 sites: C(8,4) = 70 relabellings, enumerated exactly; each has its
        // mirror (roles swapped, the same statistic), so p >= 2/70.
        assert!(sz.exact && sz.permutations == 70, "{sz:?}");
        assert!((sz.smallest_possible_p - 2.0 / 70.0).abs() < 1e-15);
        assert!(sz.p_value >= sz.smallest_possible_p);
        (sz.p_value, sh.p_value)
    }

    #[test]
    fn a_size_only_impact_is_size_and_not_shape() {
        // Simulation with known truth (tally's own scenario): impact sites lose
        // 60% of their animals after the change, composition unchanged.
        let (ps, ph) = verdict(11, 0.4, false, false);
        assert!(ps <= 0.05, "size p {ps}");
        assert!(ph > 0.05, "shape p {ph}");
    }

    #[test]
    fn a_shape_only_impact_is_shape_and_not_size() {
        // The same number of animals (×0.3 on taxa 1–3, ×3 on taxa 4–6 keeps the
        // total near 18·0.3 + 6·3 = 23.4 against 24 — about the same size).
        let (ps, ph) = verdict(12, 24.0 / 23.4, true, false);
        assert!(ph <= 0.05, "shape p {ph}");
        assert!(ps > 0.05, "size p {ps}");
    }

    #[test]
    fn a_change_shared_by_every_site_is_no_impact() {
        let (ps, ph) = verdict(13, 0.4, true, true);
        assert!(ps > 0.05, "size p {ps}");
        assert!(ph > 0.05, "shape p {ph}");
    }

    #[test]
    fn designs_without_both_roles_are_refused() {
        let site = [0, 0, 1, 1];
        let year = [0, 1, 0, 1];
        let after = [false, true, false, true];
        let impact = [true, true];
        let rows = BaciRows {
            site: &site,
            year: &year,
            after: &after,
            impact: &impact,
        };
        let opts = BaciOptions {
            permutations: 99,
            seed: 1,
            bootstrap: 0,
        };
        assert!(baci_size(&[1.0, 2.0, 3.0, 4.0], &[1.0; 4], rows, &opts).is_err());
    }
}
