//! Which taxa carry a two-group contrast: per taxon, pooled rates and their
//! ratio, shares of the total, the taxon's exact share of the squared Hellinger
//! distance between the two centroids and of the change in total rate, and a
//! permutation test of its own change (docs/methods.md, "Taxa behind the change").
//!
//! Owns: [`contrast`], [`TaxonChange`], [`Contrast`]; for before/after ×
//! control/impact, [`baci_contrast`], [`BaciTaxon`], [`BaciContrast`].
//!
//! The split of the composition shift is additive by construction: in Hellinger
//! coordinates (square roots of each unit's profile; Legendre & Gallagher 2001,
//! Oecologia 129:271–280) the squared distance between two centroids is a sum
//! over taxa, so each taxon's term divided by the sum is its share, and the
//! shares add to 1. It says where the centroids differ, not which taxa are
//! variable: a taxon is called a driver only when its own test says its rate
//! changed (Warton, Wright & Wang 2012, Methods Ecol. Evol. 3:89–101, on why
//! contributions to an average dissimilarity are not a test).

use nalgebra::DMatrix;
use rayon::prelude::*;
use serde::Serialize;

use super::AnalysisError;
use super::baci::{BaciOptions, BaciRows, baci_size};
use super::count_model::rate_log_variance;
use super::linear_model::Grouping;
use super::permutation::benjamini_hochberg;
use super::size_test::{SizeTestOptions, rate_test};
use super::trend::t_quantile;

/// One taxon of a contrast.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TaxonChange {
    /// Column of the taxon in the matrix.
    pub column: usize,
    /// Pooled rate Σ count ÷ Σ effort over the reference units.
    pub rate_reference: f64,
    /// The same over the group's units.
    pub rate_group: f64,
    /// `rate_group / rate_reference` (`None` when the reference caught none).
    pub ratio: Option<f64>,
    /// Lower end of its 95 % interval (see [`contrast`]).
    pub ratio_ci_low: Option<f64>,
    /// Upper end.
    pub ratio_ci_high: Option<f64>,
    /// The taxon's share of the reference's total rate.
    pub share_reference: f64,
    /// Its share of the group's total rate.
    pub share_group: f64,
    /// `100 (share_group − share_reference)`, percentage points.
    pub share_change_pp: f64,
    /// Its share of the squared Hellinger distance between the centroids.
    pub shape_contribution: Option<f64>,
    /// Its share of the change in total rate (`None` when the totals are equal).
    pub size_contribution: Option<f64>,
    /// Permutation p-value of its change in rate (`None` when not tested).
    pub p_value: Option<f64>,
    /// Benjamini–Hochberg adjusted across the tested taxa.
    pub p_adjusted: Option<f64>,
}

/// Every taxon of a contrast, in column order (taxa absent from both groups left out).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Contrast {
    /// Per taxon.
    pub taxa: Vec<TaxonChange>,
    /// Squared Hellinger distance between the two centroids.
    pub shape_distance_sq: f64,
    /// Units of each side without any organism (left out of the centroids).
    pub empty_units: (usize, usize),
    /// Permutations of each taxon's test.
    pub permutations: usize,
}

/// The per-taxon contrast of the rows of `counts` (counts, not per-effort
/// values) with `effort` (all 1 for plain means), side 0 the reference and side
/// 1 the group (`side` per row). With `test`, each taxon present in the pair is
/// tested by [`rate_test`] on its own counts under the options' scheme and seed
/// (the main size test's design), and the p-values are adjusted by
/// Benjamini–Hochberg (1995, J. R. Stat. Soc. B 57:289–300).
///
/// The ratio's 95 % interval is `exp(ln ratio ± t·√(v_g + v_r))`, with `v` the
/// ratio-estimator variance of each log rate
/// ([`super::count_model::rate_log_variance`]) and t on `n_g + n_r − 2` df; it
/// treats units as independent (revisited sites make it too narrow), and is
/// `None` when either rate is 0 or a side has one unit.
///
/// # Errors
/// [`AnalysisError::DimensionMismatch`]; [`AnalysisError::NonFinite`] or
/// [`AnalysisError::Negative`] for bad counts; [`AnalysisError::InvalidArgument`]
/// for effort that is not positive or a side without units; the test's errors.
pub fn contrast(
    counts: &DMatrix<f64>,
    effort: &[f64],
    side: &[usize],
    test: Option<&SizeTestOptions>,
) -> Result<Contrast, AnalysisError> {
    let (n, p) = counts.shape();
    super::count_model::check_taxon_counts(counts, effort, &[side.len()])?;
    let rows = |s: usize| -> Vec<usize> { (0..n).filter(|&i| side[i] == s).collect() };
    let (reference, group) = (rows(0), rows(1));
    if reference.is_empty() || group.is_empty() || reference.len() + group.len() != n {
        return Err(AnalysisError::InvalidArgument {
            name: "side",
            reason: "every row must be on side 0 (reference) or 1 (group), with rows on both"
                .into(),
        });
    }
    let column =
        |j: usize, idx: &[usize]| -> Vec<f64> { idx.iter().map(|&i| counts[(i, j)]).collect() };
    let effort_of = |idx: &[usize]| -> Vec<f64> { idx.iter().map(|&i| effort[i]).collect() };
    let (e_ref, e_grp) = (effort_of(&reference), effort_of(&group));

    // Hellinger centroids over the units with organisms.
    let totals: Vec<f64> = (0..n).map(|i| counts.row(i).sum()).collect();
    let centroid = |idx: &[usize]| -> (Vec<f64>, usize) {
        let full: Vec<usize> = idx.iter().copied().filter(|&i| totals[i] > 0.0).collect();
        let mut c = vec![0.0; p];
        for &i in &full {
            for (j, cj) in c.iter_mut().enumerate() {
                *cj += (counts[(i, j)] / totals[i]).sqrt();
            }
        }
        let k = full.len().max(1) as f64;
        c.iter_mut().for_each(|v| *v /= k);
        (c, idx.len() - full.len())
    };
    let (c_ref, empty_ref) = centroid(&reference);
    let (c_grp, empty_grp) = centroid(&group);
    let sq: Vec<f64> = (0..p).map(|j| (c_grp[j] - c_ref[j]).powi(2)).collect();
    let d2: f64 = sq.iter().sum();

    let present: Vec<usize> = (0..p)
        .filter(|&j| (0..n).any(|i| counts[(i, j)] > 0.0))
        .collect();
    let rate = |j: usize, idx: &[usize], e: &[f64]| rate_log_variance(&column(j, idx), e);
    let r_ref: Vec<(f64, Option<f64>)> = present
        .iter()
        .map(|&j| rate(j, &reference, &e_ref))
        .collect();
    let r_grp: Vec<(f64, Option<f64>)> = present.iter().map(|&j| rate(j, &group, &e_grp)).collect();
    let total_ref: f64 = r_ref.iter().map(|r| r.0).sum();
    let total_grp: f64 = r_grp.iter().map(|r| r.0).sum();
    let dtotal = total_grp - total_ref;
    let size_defined = dtotal.abs() > 1e-12 * total_grp.abs().max(total_ref.abs());
    let t = t_quantile(0.975, (n - 2).max(1) as f64)?;

    let mut taxa = Vec::with_capacity(present.len());
    for (k, &j) in present.iter().enumerate() {
        let ((rr, vr), (rg, vg)) = (r_ref[k], r_grp[k]);
        let ratio = (rr > 0.0).then(|| rg / rr);
        let ci = match (ratio, vr, vg) {
            (Some(q), Some(a), Some(b)) if q > 0.0 => {
                let half = t * (a + b).sqrt();
                Some((q * (-half).exp(), q * half.exp()))
            }
            _ => None,
        };
        let share = |r: f64, total: f64| if total > 0.0 { r / total } else { 0.0 };
        let (sr, sg) = (share(rr, total_ref), share(rg, total_grp));
        taxa.push(TaxonChange {
            column: j,
            rate_reference: rr,
            rate_group: rg,
            ratio,
            ratio_ci_low: ci.map(|c| c.0),
            ratio_ci_high: ci.map(|c| c.1),
            share_reference: sr,
            share_group: sg,
            share_change_pp: 100.0 * (sg - sr),
            shape_contribution: (d2 > 0.0).then(|| sq[j] / d2),
            size_contribution: size_defined.then(|| (rg - rr) / dtotal),
            p_value: None,
            p_adjusted: None,
        });
    }
    let mut permutations = 0;
    if let Some(opts) = test {
        let g = Grouping::from_codes(side);
        let mut ps = Vec::with_capacity(taxa.len());
        for t in &taxa {
            let y: Vec<f64> = (0..n).map(|i| counts[(i, t.column)]).collect();
            // The F of the rate model is symmetric in the groups: a taxon the
            // reference never caught is tested with the group as the reference.
            let mut o = SizeTestOptions {
                bootstrap: 0,
                reference: 0,
                ..opts.clone()
            };
            if t.rate_reference == 0.0 {
                o.reference = 1;
            }
            let r = rate_test(&y, effort, &g, &o, None)?;
            permutations = r.permutations;
            ps.push(r.p_value);
        }
        let adjusted = benjamini_hochberg(&ps);
        for ((t, p), a) in taxa.iter_mut().zip(&ps).zip(adjusted) {
            t.p_value = Some(*p);
            t.p_adjusted = Some(a);
        }
    }
    Ok(Contrast {
        taxa,
        shape_distance_sq: d2,
        empty_units: (empty_ref, empty_grp),
        permutations,
    })
}

/// One taxon of a before/after × control/impact contrast ([`baci_contrast`]).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BaciTaxon {
    /// Column of the taxon in the matrix.
    pub column: usize,
    /// Pooled rate Σ count ÷ Σ effort of the control sites before.
    pub rate_control_before: f64,
    /// The same after.
    pub rate_control_after: f64,
    /// Of the impact sites before.
    pub rate_impact_before: f64,
    /// Of the impact sites after.
    pub rate_impact_after: f64,
    /// `(impact after ÷ impact before) ÷ (control after ÷ control before)`
    /// (`None` when a rate is 0).
    pub ratio_of_ratios: Option<f64>,
    /// Lower end of its 95 % interval (see [`baci_contrast`]).
    pub ratio_ci_low: Option<f64>,
    /// Upper end.
    pub ratio_ci_high: Option<f64>,
    /// Change of the taxon's share of the impact sites' total rate minus that
    /// of the control sites, percentage points.
    pub share_change_pp: f64,
    /// Its share of the squared distance between the impact and control sites'
    /// mean composition shifts in Hellinger coordinates.
    pub shape_contribution: Option<f64>,
    /// Its share of the difference in the change of the total rate, impact
    /// minus control (`None` when that difference is 0).
    pub size_contribution: Option<f64>,
    /// Permutation p-value of its own period × role interaction (`None` when
    /// not tested: a cell never caught it, so the interaction is infinite).
    pub p_value: Option<f64>,
    /// Benjamini–Hochberg adjusted across the tested taxa.
    pub p_adjusted: Option<f64>,
}

/// Every taxon of a BACI contrast, in column order (taxa never caught left out).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BaciContrast {
    /// Per taxon.
    pub taxa: Vec<BaciTaxon>,
    /// Squared Hellinger distance between the two roles' mean shifts.
    pub shape_distance_sq: f64,
    /// Sites whose shift enters the composition split (organisms before and after).
    pub shape_sites: usize,
    /// Permutations of each taxon's test.
    pub permutations: usize,
}

/// The per-taxon BACI contrast of `counts` (counts, not per-effort values) with
/// `effort`, rows described by `rows` (as the BACI tests take them). Per taxon:
/// the pooled rates of the four cells; the ratio of ratios with the 95 %
/// interval `exp(ln q ± t·√Σ v)`, v the ratio-estimator variance of each cell's
/// log rate ([`rate_log_variance`]) and t on n − 4 df, which treats rows as
/// independent (revisited sites make it too narrow); the split of the
/// composition interaction: with each site's shift `z_s` = mean Hellinger
/// coordinates after − before (rows with organisms; Legendre & Gallagher 2001),
/// the squared distance between the impact and the control sites' mean shifts
/// is a sum over taxa, so each taxon's term over the sum is its exact share;
/// the split of the size interaction `(ΔI_j − ΔC_j) / (ΔI − ΔC)`, Δ the change
/// of a rate from before to after; and, with `test`, the BACI size test
/// ([`baci_size`], the main test's scheme and seed) on the taxon's counts at
/// the sites that caught it, adjusted by Benjamini–Hochberg across taxa.
///
/// # Errors
/// [`AnalysisError::DimensionMismatch`]; [`AnalysisError::NonFinite`] or
/// [`AnalysisError::Negative`] for bad counts; [`AnalysisError::InvalidArgument`]
/// for effort that is not positive, or a design without both roles in both periods.
pub fn baci_contrast(
    counts: &DMatrix<f64>,
    effort: &[f64],
    rows: BaciRows<'_>,
    test: Option<&BaciOptions>,
) -> Result<BaciContrast, AnalysisError> {
    let (n, p) = counts.shape();
    super::count_model::check_taxon_counts(
        counts,
        effort,
        &[rows.site.len(), rows.year.len(), rows.after.len()],
    )?;
    let role = |i: usize| rows.impact.get(rows.site[i]).copied().unwrap_or(false);
    // Cells: 0 control before, 1 control after, 2 impact before, 3 impact after.
    let cell = |i: usize| 2 * usize::from(role(i)) + usize::from(rows.after[i]);
    let cells: [Vec<usize>; 4] =
        std::array::from_fn(|c| (0..n).filter(|&i| cell(i) == c).collect());
    if cells.iter().any(Vec::is_empty) {
        return Err(AnalysisError::InvalidArgument {
            name: "rows",
            reason: "a BACI contrast needs control and impact rows before and after".into(),
        });
    }
    let totals: Vec<f64> = (0..n).map(|i| counts.row(i).sum()).collect();

    // Site shifts in Hellinger coordinates, then the two roles' mean shifts.
    let n_sites = rows.site.iter().max().map_or(0, |m| m + 1);
    let mut sum = vec![vec![vec![0.0; p]; 2]; n_sites];
    let mut k = vec![[0usize; 2]; n_sites];
    for i in 0..n {
        if totals[i] > 0.0 {
            let (s, a) = (rows.site[i], usize::from(rows.after[i]));
            k[s][a] += 1;
            for j in 0..p {
                sum[s][a][j] += (counts[(i, j)] / totals[i]).sqrt();
            }
        }
    }
    let mut mean_shift = [vec![0.0; p], vec![0.0; p]];
    let mut in_role = [0usize; 2];
    for s in 0..n_sites {
        if k[s][0] == 0 || k[s][1] == 0 {
            continue;
        }
        let r = usize::from(rows.impact.get(s).copied().unwrap_or(false));
        in_role[r] += 1;
        for j in 0..p {
            mean_shift[r][j] += sum[s][1][j] / k[s][1] as f64 - sum[s][0][j] / k[s][0] as f64;
        }
    }
    let sq: Vec<f64> = (0..p)
        .map(|j| {
            if in_role[0] == 0 || in_role[1] == 0 {
                0.0
            } else {
                (mean_shift[1][j] / in_role[1] as f64 - mean_shift[0][j] / in_role[0] as f64)
                    .powi(2)
            }
        })
        .collect();
    let d2: f64 = sq.iter().sum();

    let present: Vec<usize> = (0..p)
        .filter(|&j| (0..n).any(|i| counts[(i, j)] > 0.0))
        .collect();
    let rate = |j: usize, c: usize| {
        let y: Vec<f64> = cells[c].iter().map(|&i| counts[(i, j)]).collect();
        let e: Vec<f64> = cells[c].iter().map(|&i| effort[i]).collect();
        rate_log_variance(&y, &e)
    };
    let r: Vec<[(f64, Option<f64>); 4]> = present
        .iter()
        .map(|&j| std::array::from_fn(|c| rate(j, c)))
        .collect();
    let total: [f64; 4] = std::array::from_fn(|c| r.iter().map(|x| x[c].0).sum());
    let delta = (total[3] - total[2]) - (total[1] - total[0]);
    let scale = total.iter().fold(0.0_f64, |a, b| a.max(b.abs()));
    let size_defined = delta.abs() > 1e-12 * scale;
    let t = t_quantile(0.975, (n.saturating_sub(4)).max(1) as f64)?;
    let share = |v: f64, tot: f64| if tot > 0.0 { v / tot } else { 0.0 };
    let mut taxa = Vec::with_capacity(present.len());
    for (x, &j) in r.iter().zip(&present) {
        let rates = [x[0].0, x[1].0, x[2].0, x[3].0];
        let q = rates
            .iter()
            .all(|v| *v > 0.0)
            .then(|| (rates[3] / rates[2]) / (rates[1] / rates[0]));
        let ci = match (q, x[0].1, x[1].1, x[2].1, x[3].1) {
            (Some(q), Some(a), Some(b), Some(c), Some(d)) => {
                let half = t * (a + b + c + d).sqrt();
                Some((q * (-half).exp(), q * half.exp()))
            }
            _ => None,
        };
        let shares: [f64; 4] = std::array::from_fn(|c| share(rates[c], total[c]));
        taxa.push(BaciTaxon {
            column: j,
            rate_control_before: rates[0],
            rate_control_after: rates[1],
            rate_impact_before: rates[2],
            rate_impact_after: rates[3],
            ratio_of_ratios: q,
            ratio_ci_low: ci.map(|c| c.0),
            ratio_ci_high: ci.map(|c| c.1),
            share_change_pp: 100.0 * ((shares[3] - shares[2]) - (shares[1] - shares[0])),
            shape_contribution: (d2 > 0.0).then(|| sq[j] / d2),
            size_contribution: size_defined
                .then(|| ((rates[3] - rates[2]) - (rates[1] - rates[0])) / delta),
            p_value: None,
            p_adjusted: None,
        });
    }
    let mut permutations = 0;
    if let Some(opts) = test {
        let opts = BaciOptions {
            bootstrap: 0,
            ..opts.clone()
        };
        // Each taxon's test is seeded alike and independent of the others, so they
        // run in parallel with the same results.
        let results: Vec<Option<(f64, usize)>> = taxa
            .par_iter()
            .map(|t| {
                // A cell that never caught the taxon makes its interaction infinite.
                t.ratio_of_ratios?;
                // The sites that caught the taxon: a site effect of zeros alone has
                // no finite estimate, and such a site says nothing about its change.
                let caught: Vec<usize> = (0..n_sites)
                    .filter(|&s| (0..n).any(|i| rows.site[i] == s && counts[(i, t.column)] > 0.0))
                    .collect();
                let idx: Vec<usize> = (0..n).filter(|&i| caught.contains(&rows.site[i])).collect();
                let site =
                    super::trend::recode(&idx.iter().map(|&i| rows.site[i]).collect::<Vec<_>>());
                let mut impact = vec![false; site.iter().max().map_or(0, |m| m + 1)];
                for (pos, &i) in idx.iter().enumerate() {
                    impact[site[pos]] = rows.impact.get(rows.site[i]).copied().unwrap_or(false);
                }
                if !(impact.contains(&true) && impact.contains(&false)) {
                    return None;
                }
                let year =
                    super::trend::recode(&idx.iter().map(|&i| rows.year[i]).collect::<Vec<_>>());
                let after: Vec<bool> = idx.iter().map(|&i| rows.after[i]).collect();
                let y: Vec<f64> = idx.iter().map(|&i| counts[(i, t.column)]).collect();
                let e: Vec<f64> = idx.iter().map(|&i| effort[i]).collect();
                let sub = BaciRows {
                    site: &site,
                    year: &year,
                    after: &after,
                    impact: &impact,
                };
                baci_size(&y, &e, sub, &opts)
                    .ok()
                    .map(|r| (r.p_value, r.permutations))
            })
            .collect();
        let mut tested = Vec::new();
        let mut ps = Vec::new();
        for (k, r) in results.into_iter().enumerate() {
            if let Some((p, perms)) = r {
                permutations = permutations.max(perms);
                tested.push(k);
                ps.push(p);
            }
        }
        for (&k, (p, a)) in tested.iter().zip(ps.iter().zip(benjamini_hochberg(&ps))) {
            taxa[k].p_value = Some(*p);
            taxa[k].p_adjusted = Some(a);
        }
    }
    Ok(BaciContrast {
        taxa,
        shape_distance_sq: d2,
        shape_sites: in_role[0] + in_role[1],
        permutations,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::permutation::Scheme;
    use serde_json::Value;

    const FIXTURE: &str = include_str!("../../tests/reference/taxa.json");

    fn options(permutations: usize, seed: u64) -> SizeTestOptions {
        SizeTestOptions {
            permutations,
            seed,
            scheme: Scheme::Free,
            bootstrap: 0,
            reference: 0,
            confidence: 0.95,
            clusters: None,
        }
    }

    fn close(what: &str, a: Option<f64>, b: &Value) {
        match (a, b.as_f64()) {
            (None, None) => {}
            (Some(a), Some(b)) => assert!(
                (a - b).abs() <= 1e-12 * b.abs().max(1.0),
                "{what}: {a} vs {b}"
            ),
            (a, _) => panic!("{what}: tally {a:?}, fixture {b}"),
        }
    }

    #[test]
    fn rates_ratios_shares_and_contributions_match_the_numpy_fixture() {
        // tests/reference/make_taxa_fixtures.py: the definitions written out in NumPy,
        // with units that caught nothing and unequal effort.
        let fx: Value = serde_json::from_str(FIXTURE).unwrap();
        for case in fx["cases"].as_array().unwrap() {
            let name = case["name"].as_str().unwrap();
            let rows: Vec<Vec<f64>> = case["counts"]
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
            let y = DMatrix::from_fn(n, p, |i, j| rows[i][j]);
            let effort: Vec<f64> = case["effort"]
                .as_array()
                .unwrap()
                .iter()
                .map(|v| v.as_f64().unwrap())
                .collect();
            let mut side = vec![9; n];
            for v in case["reference_rows"].as_array().unwrap() {
                side[v.as_u64().unwrap() as usize] = 0;
            }
            for v in case["group_rows"].as_array().unwrap() {
                side[v.as_u64().unwrap() as usize] = 1;
            }
            let c = contrast(&y, &effort, &side, None).unwrap();
            close(
                &format!("{name}.d2"),
                Some(c.shape_distance_sq),
                &case["shape_distance_sq"],
            );
            let mut shape_sum = 0.0;
            let mut size_sum = 0.0;
            for t in &c.taxa {
                let j = t.column;
                let at = |k: &str| &case[k][j];
                let w = |k: &str| format!("{name}.T{j}.{k}");
                close(
                    &w("rate_reference"),
                    Some(t.rate_reference),
                    at("rate_reference"),
                );
                close(&w("rate_group"), Some(t.rate_group), at("rate_group"));
                close(&w("ratio"), t.ratio, at("ratio"));
                close(
                    &w("share_reference"),
                    Some(t.share_reference),
                    at("share_reference"),
                );
                close(&w("share_group"), Some(t.share_group), at("share_group"));
                close(
                    &w("share_change_pp"),
                    Some(t.share_change_pp),
                    at("share_change_pp"),
                );
                close(&w("shape"), t.shape_contribution, at("shape_contribution"));
                close(&w("size"), t.size_contribution, at("size_contribution"));
                shape_sum += t.shape_contribution.unwrap_or(0.0);
                size_sum += t.size_contribution.unwrap_or(0.0);
            }
            // Exact and additive: the contributions add to 1.
            assert!(
                (shape_sum - 1.0).abs() < 1e-12,
                "{name}: shape sum {shape_sum}"
            );
            if c.taxa.iter().any(|t| t.size_contribution.is_some()) {
                assert!(
                    (size_sum - 1.0).abs() < 1e-12,
                    "{name}: size sum {size_sum}"
                );
            }
            // Taxa absent from both groups are not listed.
            for t in &c.taxa {
                assert!(t.rate_reference > 0.0 || t.rate_group > 0.0);
            }
        }
    }

    #[test]
    fn the_ratio_interval_is_the_ratio_estimator_on_the_log_scale() {
        // By hand: reference counts 2, 0, 4 over effort 1, 1, 2 (rate 1.5,
        // variance of ln r 3·3.5/32 / 1.5²); group 6, 3 over effort 1, 1 (rate 4.5,
        // variance 2·4.5/4 / 4.5²); t on 3 df.
        let y = DMatrix::from_column_slice(5, 1, &[2.0, 0.0, 4.0, 6.0, 3.0]);
        let c = contrast(&y, &[1.0, 1.0, 2.0, 1.0, 1.0], &[0, 0, 0, 1, 1], None).unwrap();
        let t = &c.taxa[0];
        assert!((t.ratio.unwrap() - 3.0).abs() < 1e-15);
        let v: f64 = 3.0 * 3.5 / 32.0 / 2.25 + 2.0 * 4.5 / 4.0 / 20.25;
        let half = t_quantile(0.975, 3.0).unwrap() * v.sqrt();
        assert!((t.ratio_ci_low.unwrap() - 3.0 * (-half).exp()).abs() < 1e-12);
        assert!((t.ratio_ci_high.unwrap() - 3.0 * half.exp()).abs() < 1e-12);
    }

    #[test]
    fn two_changed_taxa_are_the_ones_flagged() {
        // Simulation with known truth: 12 taxa, 15 + 15 units; taxa 0 and 3 change
        // (×0.3 and ×3), the others keep their rates. Over 20 seeds, the two rank
        // first by shape contribution in most seeds, are flagged (BH p ≤ 0.05) in
        // every seed, and the other 10 taxa are flagged at most 5 times in all
        // (200 null taxon tests at a false discovery rate of 5 %; the 99.9 %
        // point of Binomial(200, 0.05) is 21 (value from memory), and BH is
        // stricter; common practice, no source).
        use crate::analysis::size_test::tests::poisson;
        use rand::SeedableRng;
        let base: Vec<f64> = (0..12).map(|j| 30.0 * 0.8_f64.powi(j)).collect();
        let (mut top_two, mut false_flags) = (0, 0);
        for seed in 0..20u64 {
            let mut rng = rand::rngs::ChaCha8Rng::seed_from_u64(seed);
            let n = 30;
            let side: Vec<usize> = (0..n).map(|i| usize::from(i >= 15)).collect();
            let y = DMatrix::from_fn(n, 12, |i, j| {
                let m = base[j]
                    * match (side[i], j) {
                        (1, 0) => 0.3,
                        (1, 3) => 3.0,
                        _ => 1.0,
                    };
                poisson(&mut rng, m)
            });
            let c = contrast(&y, &vec![1.0; n], &side, Some(&options(199, seed))).unwrap();
            let mut order: Vec<&TaxonChange> = c.taxa.iter().collect();
            order.sort_by(|a, b| {
                b.shape_contribution
                    .unwrap()
                    .total_cmp(&a.shape_contribution.unwrap())
            });
            let first: Vec<usize> = order.iter().take(2).map(|t| t.column).collect();
            if first.contains(&0) && first.contains(&3) {
                top_two += 1;
            }
            for t in &c.taxa {
                let flagged = t.p_adjusted.unwrap() <= 0.05;
                if t.column == 0 || t.column == 3 {
                    assert!(flagged, "seed {seed}: taxon {} not flagged", t.column);
                } else if flagged {
                    false_flags += 1;
                }
            }
        }
        assert!(
            top_two >= 18,
            "the changed taxa ranked first in {top_two} of 20 seeds"
        );
        assert!(false_flags <= 5, "{false_flags} unchanged taxa flagged");
    }

    #[test]
    fn baci_rates_ratios_and_splits_match_the_numpy_fixture() {
        // tests/reference/make_baci_taxa_fixtures.py: the definitions written out in
        // NumPy, with a row that caught nothing, unequal effort and a taxon absent
        // from one cell.
        let fx: Value =
            serde_json::from_str(include_str!("../../tests/reference/baci_taxa.json")).unwrap();
        let f = |v: &Value| -> Vec<f64> {
            v.as_array()
                .unwrap()
                .iter()
                .map(|x| x.as_f64().unwrap())
                .collect()
        };
        let b = |v: &Value| -> Vec<bool> {
            v.as_array()
                .unwrap()
                .iter()
                .map(|x| x.as_bool().unwrap())
                .collect()
        };
        let site: Vec<usize> = f(&fx["site"]).iter().map(|&v| v as usize).collect();
        let year: Vec<usize> = f(&fx["year"]).iter().map(|&v| v as usize).collect();
        let (after, impact) = (b(&fx["after"]), b(&fx["impact"]));
        let effort = f(&fx["effort"]);
        let rows: Vec<Vec<f64>> = fx["counts"].as_array().unwrap().iter().map(f).collect();
        let y = DMatrix::from_fn(rows.len(), rows[0].len(), |i, j| rows[i][j]);
        let design = BaciRows {
            site: &site,
            year: &year,
            after: &after,
            impact: &impact,
        };
        let opts = BaciOptions {
            permutations: 99,
            seed: 7,
            bootstrap: 0,
        };
        let c = baci_contrast(&y, &effort, design, Some(&opts)).unwrap();
        close("d2", Some(c.shape_distance_sq), &fx["shape_distance_sq"]);
        let want = fx["taxa"].as_array().unwrap();
        assert_eq!(c.taxa.len(), want.len());
        for (t, w) in c.taxa.iter().zip(want) {
            let r = f(&w["rates_cb_ca_ib_ia"]);
            let got = [
                t.rate_control_before,
                t.rate_control_after,
                t.rate_impact_before,
                t.rate_impact_after,
            ];
            for (a, e) in got.iter().zip(&r) {
                assert!((a - e).abs() <= 1e-12 * e.abs().max(1.0), "{a} vs {e}");
            }
            close("ratio", t.ratio_of_ratios, &w["ratio_of_ratios"]);
            close("share", Some(t.share_change_pp), &w["share_change_pp"]);
            close("shape", t.shape_contribution, &w["shape_contribution"]);
            close("size", t.size_contribution, &w["size_contribution"]);
            if let (Some(q), Some(lo), Some(hi)) =
                (t.ratio_of_ratios, t.ratio_ci_low, t.ratio_ci_high)
            {
                assert!(lo < q && q < hi);
            }
        }
        let total: f64 = c.taxa.iter().filter_map(|t| t.shape_contribution).sum();
        assert!((total - 1.0).abs() < 1e-12);
        // The two planted changes (taxa 0 and 3) carry most of the shift and are the
        // only ones whose own test is clear.
        let mut by_shape: Vec<&BaciTaxon> = c.taxa.iter().collect();
        by_shape.sort_by(|a, b| {
            b.shape_contribution
                .unwrap_or(0.0)
                .total_cmp(&a.shape_contribution.unwrap_or(0.0))
        });
        let top: Vec<usize> = by_shape.iter().take(2).map(|t| t.column).collect();
        assert!(top.contains(&3), "{top:?}");
        // With 3 impact and 3 control sites there are 20 role arrangements, and
        // swapping the roles gives the same statistic: p cannot go below 0.1.
        let p = |k: usize| c.taxa[k].p_value.unwrap();
        assert!((p(0) - 0.1).abs() < 1e-12 && (p(3) - 0.1).abs() < 1e-12);
        assert!(
            c.taxa
                .iter()
                .all(|t| t.p_value.is_none_or(|v| v >= 0.1 - 1e-12))
        );
        // A taxon absent from one cell has no finite interaction: not tested.
        assert!(c.taxa[7].ratio_of_ratios.is_none() && c.taxa[7].p_value.is_none());
        assert!(c.permutations > 0);
    }
}
