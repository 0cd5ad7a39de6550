//! Diversity of one sample of counted individuals, read apart from its size:
//! Hill numbers, sample coverage, Chao1, rarefaction (Hurlbert's expected
//! richness with its variance) and richness at a stated sample coverage by
//! interpolation or extrapolation (docs/methods.md, "Diversity at equal coverage").
//!
//! Owns: [`Sample`] (a sample's abundance classes and every estimator on it),
//! [`Chao1`], [`Rarefied`], [`AtCoverage`], [`common_coverage`].
//!
//! A sample is held as its abundance classes (abundance k, number of taxa with
//! k individuals), so the estimators cost O(distinct abundances) per point.
//! Every ratio of binomial coefficients is a running product of
//! `(n − m − i)/(n − i)`, not a difference of log-gammas: exact to rounding for
//! any n, and it reaches zero exactly where the coefficient does.

use super::AnalysisError;
use super::permutation::{block_rng, bounded};
use super::prec::quantile;

/// 97.5 % point of the standard normal, 1.959963984540054 (value from memory;
/// the fixture recomputes the interval with SciPy's quantile).
const Z975: f64 = 1.959_963_984_540_054;

/// Largest count held exactly by an `f64` (2^53).
const MAX_COUNT: f64 = 9_007_199_254_740_992.0;

/// One sample: its individuals grouped by taxon abundance.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Sample {
    /// `(k, f_k)`: f_k taxa with exactly k ≥ 1 individuals, k ascending.
    classes: Vec<(u64, u64)>,
    n: u64,
    s: u64,
}

/// Chao1 estimate of richness with its variance and log-normal 95 % interval.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Chao1 {
    /// `S + ((n − 1)/n) f1² / (2 f2)`, or `S + ((n − 1)/n) f1 (f1 − 1) / 2` when f2 = 0.
    pub estimate: f64,
    /// Its variance (`None` without singletons: nothing is estimated to be missing).
    pub variance: Option<f64>,
    /// `S + T/K` and `S + T·K` (`None` when no taxon is estimated to be missing).
    pub interval: Option<(f64, f64)>,
}

/// Expected richness of a random subsample of m individuals.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Rarefied {
    /// Subsample size m.
    pub m: u64,
    /// `E[S_m]`.
    pub richness: f64,
    /// Standard deviation of `S_m` over subsamples (`None` unless asked for).
    pub sd: Option<f64>,
    /// Estimated coverage of a subsample of m individuals.
    pub coverage: f64,
}

/// Richness at a stated sample coverage.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum AtCoverage {
    /// The coverage is reached at `size` individuals (continuous), by
    /// interpolation (`size ≤ n`) or extrapolation (`n < size ≤ 2n`).
    Reached {
        /// Sample size (individuals) at which the coverage is reached.
        size: f64,
        /// Richness there.
        richness: f64,
        /// True when `size > n`.
        extrapolated: bool,
    },
    /// Beyond twice the sample's individuals: no reliable estimate. `reach` is
    /// the coverage at 2n.
    Beyond {
        /// Coverage of the sample extrapolated to twice its size.
        reach: f64,
    },
    /// Fewer than two individuals: coverage cannot be estimated.
    TooFew,
}

impl Sample {
    /// A sample from counts per taxon (zeros allowed and ignored).
    ///
    /// # Errors
    /// [`AnalysisError::NonFinite`], [`AnalysisError::Negative`] (row 0, the
    /// column) and [`AnalysisError::InvalidArgument`] for a count that is not a
    /// whole number up to 2^53: these estimators count individuals.
    pub fn new(counts: &[f64]) -> Result<Sample, AnalysisError> {
        let mut whole = Vec::with_capacity(counts.len());
        for (j, &v) in counts.iter().enumerate() {
            if !v.is_finite() {
                return Err(AnalysisError::NonFinite { row: 0, col: j });
            }
            if v < 0.0 {
                return Err(AnalysisError::Negative { row: 0, col: j });
            }
            if v.fract() != 0.0 || v > MAX_COUNT {
                return Err(AnalysisError::InvalidArgument {
                    name: "counts",
                    reason: format!(
                        "diversity estimators count individuals; column {j} holds {v} \
                         (counts per unit effort cannot be counted: use the raw counts)"
                    ),
                });
            }
            whole.push(v as u64);
        }
        Ok(Sample::from_counts(&whole))
    }

    /// A sample from whole counts per taxon (zeros ignored).
    pub fn from_counts(counts: &[u64]) -> Sample {
        let mut ks: Vec<u64> = counts.iter().copied().filter(|&c| c > 0).collect();
        ks.sort_unstable();
        let mut classes: Vec<(u64, u64)> = Vec::new();
        for k in ks {
            match classes.last_mut() {
                Some((last, f)) if *last == k => *f += 1,
                _ => classes.push((k, 1)),
            }
        }
        let n = classes.iter().map(|(k, f)| k * f).sum();
        let s = classes.iter().map(|(_, f)| f).sum();
        Sample { classes, n, s }
    }

    /// Individuals n.
    pub fn individuals(&self) -> u64 {
        self.n
    }

    /// Observed richness S (Hill number of order 0).
    pub fn richness(&self) -> u64 {
        self.s
    }

    /// f_k: the number of taxa with exactly k individuals.
    pub fn taxa_with(&self, k: u64) -> u64 {
        self.classes
            .iter()
            .find(|(a, _)| *a == k)
            .map_or(0, |(_, f)| *f)
    }

    fn f1(&self) -> f64 {
        self.taxa_with(1) as f64
    }

    fn f2(&self) -> f64 {
        self.taxa_with(2) as f64
    }

    /// Hill number of order 1, `exp(−Σ p ln p)` (Hill 1973, Ecology 54:427–432;
    /// Jost 2006, Oikos 113:363–375). `None` for an empty sample.
    pub fn hill_q1(&self) -> Option<f64> {
        if self.n == 0 {
            return None;
        }
        let n = self.n as f64;
        let h: f64 = self
            .classes
            .iter()
            .map(|&(k, f)| {
                let p = k as f64 / n;
                -(f as f64) * p * p.ln()
            })
            .sum();
        Some(h.exp())
    }

    /// Hill number of order 2, `1 / Σ p²` (inverse Simpson concentration).
    /// `None` for an empty sample.
    pub fn hill_q2(&self) -> Option<f64> {
        if self.n == 0 {
            return None;
        }
        let n = self.n as f64;
        let c: f64 = self
            .classes
            .iter()
            .map(|&(k, f)| f as f64 * (k as f64 / n).powi(2))
            .sum();
        Some(1.0 / c)
    }

    /// The base of the coverage deficit's geometric decay beyond the sample:
    /// `(n − 1) f1 / ((n − 1) f1 + 2 f2)`, or with `f1 − 1` and 2 when f2 = 0
    /// (Chao & Jost 2012, Ecology 93:2533–2547).
    fn decay(&self) -> f64 {
        let (n, f1, f2) = (self.n as f64, self.f1(), self.f2());
        if f2 > 0.0 {
            (n - 1.0) * f1 / ((n - 1.0) * f1 + 2.0 * f2)
        } else {
            (n - 1.0) * (f1 - 1.0) / ((n - 1.0) * (f1 - 1.0) + 2.0)
        }
    }

    /// Estimated sample coverage, `1 − (f1/n)·decay` (Chao & Jost 2012). `None`
    /// below two individuals.
    pub fn coverage(&self) -> Option<f64> {
        self.extrapolated(0.0).map(|(_, c)| c)
    }

    /// f̂0, the number of taxa present but not seen (Chao1 less S).
    fn f0(&self) -> f64 {
        let (n, f1, f2) = (self.n as f64, self.f1(), self.f2());
        let a = (n - 1.0) / n;
        if f2 > 0.0 {
            a * f1 * f1 / (2.0 * f2)
        } else {
            a * f1 * (f1 - 1.0) / 2.0
        }
    }

    /// Chao1 (Chao 1987, Biometrics 43:783–791, with the `(n − 1)/n` factor),
    /// its variance and the log-normal interval of the same paper. `None` below
    /// two individuals.
    pub fn chao1(&self) -> Option<Chao1> {
        if self.n < 2 {
            return None;
        }
        let (n, f1, f2) = (self.n as f64, self.f1(), self.f2());
        let s = self.s as f64;
        let a = (n - 1.0) / n;
        let estimate = s + self.f0();
        let variance = if f1 == 0.0 {
            None
        } else if f2 > 0.0 {
            let r = f1 / f2;
            Some(f2 * (a / 2.0 * r.powi(2) + a * a * r.powi(3) + a * a / 4.0 * r.powi(4)))
        } else {
            Some(
                a * f1 * (f1 - 1.0) / 2.0 + a * a * f1 * (2.0 * f1 - 1.0).powi(2) / 4.0
                    - a * a * f1.powi(4) / (4.0 * estimate),
            )
        };
        let t = estimate - s;
        let interval = variance.filter(|_| t > 0.0).map(|v| {
            let k = (Z975 * (1.0 + v / (t * t)).ln().sqrt()).exp();
            (s + t / k, s + t * k)
        });
        Some(Chao1 {
            estimate,
            variance,
            interval,
        })
    }

    /// `q[k] = Π_{1 ≤ i < k} (n − m − i)/(n − i)` for k = 0..=upto, so that
    /// `C(n − k, m)/C(n − 1, m) = q[k]` and `C(n − k, m)/C(n, m) = a0·q[k]` with
    /// `a0 = (n − m)/n`.
    fn products(&self, m: u64, upto: u64) -> Vec<f64> {
        let (n, m) = (self.n as f64, m as f64);
        let mut q = Vec::with_capacity(upto as usize + 1);
        q.push(1.0);
        if upto >= 1 {
            q.push(1.0);
        }
        for i in 1..upto {
            let i = i as f64;
            let a = if n - m - i > 0.0 {
                (n - m - i) / (n - i)
            } else {
                0.0
            };
            let last = *q.last().expect("invariant: q is not empty");
            q.push(last * a);
        }
        q
    }

    /// Rarefaction to m individuals (m ≤ n): Hurlbert's expected richness
    /// `Σ_j [1 − C(n − X_j, m)/C(n, m)]` (Hurlbert 1971, Ecology 52:577–586), the
    /// coverage of the subsample `1 − Σ_j (X_j/n) C(n − X_j, m)/C(n − 1, m)`
    /// (Chao & Jost 2012; the sample coverage at m = n) and, with `with_sd`, the
    /// standard deviation of Heck, van Belle & Simberloff (1975, Ecology
    /// 56:1459–1461). `None` when m > n.
    pub fn rarefied(&self, m: u64, with_sd: bool) -> Option<Rarefied> {
        if m > self.n {
            return None;
        }
        if m == self.n {
            return Some(Rarefied {
                m,
                richness: self.s as f64,
                sd: with_sd.then_some(0.0),
                coverage: self
                    .coverage()
                    .unwrap_or(if self.n == 0 { 0.0 } else { 1.0 }),
            });
        }
        let max_k = self.classes.last().map_or(0, |c| c.0);
        let upto = if with_sd {
            (2 * max_k).min(self.n)
        } else {
            max_k
        };
        let q = self.products(m, upto);
        let n = self.n as f64;
        let a0 = (n - m as f64) / n;
        let r = |k: u64| a0 * q[k as usize];
        let mut absent = 0.0;
        let mut deficit = 0.0;
        for &(k, f) in &self.classes {
            absent += f as f64 * r(k);
            deficit += f as f64 * (k as f64 / n) * q[k as usize];
        }
        let sd = with_sd.then(|| {
            let mut v = 0.0;
            for (a, &(ka, fa)) in self.classes.iter().enumerate() {
                let ra = r(ka);
                v += fa as f64 * ra * (1.0 - ra);
                if fa >= 2 {
                    let fa = fa as f64;
                    v += fa * (fa - 1.0) * (r(2 * ka) - ra * ra);
                }
                let fa = fa as f64;
                for &(kb, fb) in &self.classes[a + 1..] {
                    v += 2.0 * fa * fb as f64 * (r(ka + kb) - ra * r(kb));
                }
            }
            v.max(0.0).sqrt()
        });
        Some(Rarefied {
            m,
            richness: self.s as f64 - absent,
            sd,
            coverage: if m == 0 { 0.0 } else { 1.0 - deficit },
        })
    }

    /// Richness and coverage extrapolated to `n + m_star` individuals (Chao et
    /// al. 2014, Ecol. Monogr. 84:45–67): `S + f̂0 [1 − (1 − f1/(n f̂0 + f1))^m*]`
    /// and `1 − (f1/n)·decay^(m* + 1)`. `None` below two individuals.
    pub fn extrapolated(&self, m_star: f64) -> Option<(f64, f64)> {
        if self.n < 2 {
            return None;
        }
        let (n, f1) = (self.n as f64, self.f1());
        let s = self.s as f64;
        if f1 == 0.0 {
            return Some((s, 1.0));
        }
        let f0 = self.f0();
        let richness = if f0 > 0.0 {
            s + f0 * (1.0 - (1.0 - f1 / (n * f0 + f1)).powf(m_star))
        } else {
            s
        };
        Some((richness, 1.0 - f1 / n * self.decay().powf(m_star + 1.0)))
    }

    /// The coverage of the sample extrapolated to twice its size: the most an
    /// estimate at equal coverage may ask of it. `None` below two individuals.
    pub fn reach(&self) -> Option<f64> {
        self.extrapolated(self.n as f64).map(|(_, c)| c)
    }

    /// Coverage of a subsample of m individuals, for 0 ≤ m ≤ n.
    fn coverage_of(&self, m: u64) -> f64 {
        self.rarefied(m, false).map_or(f64::NAN, |r| r.coverage)
    }

    /// Richness at sample coverage `target` (0 < target ≤ 1), with the sample
    /// size that reaches it: on the rarefaction curve when the sample's own
    /// coverage is at least `target` (the first size that reaches it, linear
    /// between that integer size and the one before), on the extrapolation curve up to twice the sample size
    /// (Chao & Jost 2012; Chao et al. 2014).
    pub fn at_coverage(&self, target: f64) -> AtCoverage {
        let Some(cn) = self.coverage() else {
            return AtCoverage::TooFew;
        };
        if target <= cn {
            // The first size that reaches the target: C(lo) < target <= C(hi).
            let (mut lo, mut hi) = (0u64, self.n);
            while hi - lo > 1 {
                let mid = lo + (hi - lo) / 2;
                if self.coverage_of(mid) >= target {
                    hi = mid;
                } else {
                    lo = mid;
                }
            }
            let a = self.rarefied(lo, false).expect("invariant: lo < n");
            let b = self.rarefied(hi, false).expect("invariant: hi <= n");
            if target == b.coverage {
                return AtCoverage::Reached {
                    size: hi as f64,
                    richness: b.richness,
                    extrapolated: false,
                };
            }
            let frac = (target - a.coverage) / (b.coverage - a.coverage);
            return AtCoverage::Reached {
                size: lo as f64 + frac,
                richness: a.richness + frac * (b.richness - a.richness),
                extrapolated: false,
            };
        }
        let n = self.n as f64;
        let reach = self.reach().expect("invariant: n ≥ 2");
        let decay = self.decay();
        let m_star = ((1.0 - target) * n / self.f1()).ln() / decay.ln() - 1.0;
        if target > reach || !m_star.is_finite() {
            return AtCoverage::Beyond { reach };
        }
        // At the reach itself the inverted logarithm may land a rounding above 2n.
        let m_star = m_star.min(n);
        let (richness, _) = self.extrapolated(m_star).expect("invariant: n ≥ 2");
        AtCoverage::Reached {
            size: n + m_star,
            richness,
            extrapolated: true,
        }
    }
}

/// One point of a sample's rarefaction and extrapolation curve.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct CurvePoint {
    /// Individuals (m up to n, then n + m*).
    pub size: f64,
    /// Expected richness there.
    pub richness: f64,
    /// Estimated coverage there.
    pub coverage: f64,
    /// True beyond the sample's own individuals.
    pub extrapolated: bool,
}

impl Sample {
    /// The sample's rarefaction curve from 1 to n individuals and its
    /// extrapolation on to 2n, at about `points` sizes on each side (integer sizes
    /// up to n; the observed sample is always a point). Empty below two individuals.
    pub fn curve(&self, points: usize) -> Vec<CurvePoint> {
        if self.n < 2 || points == 0 {
            return Vec::new();
        }
        let n = self.n;
        let mut sizes: Vec<u64> = (1..=points as u64)
            .map(|k| (k * n).div_ceil(points as u64))
            .collect();
        sizes.dedup();
        let mut out: Vec<CurvePoint> = sizes
            .into_iter()
            .filter_map(|m| self.rarefied(m, false))
            .map(|r| CurvePoint {
                size: r.m as f64,
                richness: r.richness,
                coverage: r.coverage,
                extrapolated: false,
            })
            .collect();
        for k in 1..=points {
            let m_star = (n as f64) * k as f64 / points as f64;
            if let Some((richness, coverage)) = self.extrapolated(m_star) {
                out.push(CurvePoint {
                    size: n as f64 + m_star,
                    richness,
                    coverage,
                    extrapolated: true,
                });
            }
        }
        out
    }
}

/// The common coverage of a set of samples: the lowest sample coverage among
/// them, so that every sample is compared on its own rarefaction curve, with
/// the index of the sample that sets it (Chao & Jost 2012, Ecology
/// 93:2533–2547, coverage-based rarefaction). Samples below two individuals
/// are skipped; `None` when no sample has two individuals.
///
/// Extrapolation (up to twice a sample's size, Chao et al. 2014) is left to a
/// stated coverage: an automatic level at the lowest coverage reached at 2n made
/// a pure fivefold fall in numbers read as a 6 % loss of taxa (the Chao1 limit
/// of the small sample's curve is a lower bound), against 0.1 % here (test
/// `fewer_individuals_of_the_same_community_lower_raw_richness_only`).
pub fn common_coverage<'a>(samples: impl IntoIterator<Item = &'a Sample>) -> Option<(f64, usize)> {
    samples
        .into_iter()
        .enumerate()
        .filter_map(|(i, s)| s.coverage().map(|c| (c, i)))
        .min_by(|a, b| a.0.total_cmp(&b.0))
}

/// Mean of some values with a seeded percentile-bootstrap 95 % interval: the
/// values are resampled with replacement `resamples` times from generator
/// stream `stream` of `seed` (Efron & Tibshirani 1993, An Introduction to the
/// Bootstrap, ch. 13). No interval below two values or without resamples.
pub fn mean_interval(
    values: &[f64],
    resamples: usize,
    seed: u64,
    stream: u64,
) -> (Option<f64>, Option<(f64, f64)>) {
    let n = values.len();
    if n == 0 {
        return (None, None);
    }
    let mean = values.iter().sum::<f64>() / n as f64;
    if n < 2 || resamples == 0 {
        return (Some(mean), None);
    }
    let mut rng = block_rng(seed, stream);
    let mut means: Vec<f64> = (0..resamples)
        .map(|_| {
            (0..n)
                .map(|_| values[bounded(&mut rng, n as u64) as usize])
                .sum::<f64>()
                / n as f64
        })
        .collect();
    means.sort_by(f64::total_cmp);
    (
        Some(mean),
        Some((quantile(&means, 0.025), quantile(&means, 0.975))),
    )
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::rarefy::rarefy;
    use nalgebra::DMatrix;

    fn sample(c: &[u64]) -> Sample {
        Sample::from_counts(c)
    }

    const FIXTURE: &str = include_str!("../../tests/reference/diversity.json");

    /// `a` equals the fixture value `b` (or both are missing) within a relative
    /// `rel` of `b`, with an absolute floor `abs` for values that are zero.
    fn close(what: &str, a: Option<f64>, b: &serde_json::Value, rel: f64, abs: f64) {
        match (a, b.as_f64()) {
            (None, None) => {}
            (Some(a), Some(b)) => assert!(
                (a - b).abs() <= rel * b.abs() + abs,
                "{what}: tally {a}, fixture {b}"
            ),
            (a, _) => panic!("{what}: tally {a:?}, fixture {b}"),
        }
    }

    #[test]
    fn every_estimator_matches_the_numpy_fixture() {
        // tests/reference/make_diversity_fixtures.py: the published formulas
        // (Hill 1973; Chao & Jost 2012; Chao 1987; Hurlbert 1971; Heck, van Belle &
        // Simberloff 1975; Chao et al. 2014) in exact integer arithmetic.
        let fx: serde_json::Value = serde_json::from_str(FIXTURE).unwrap();
        for case in fx["samples"].as_array().unwrap() {
            let name = case["name"].as_str().unwrap();
            let counts: Vec<f64> = case["counts"]
                .as_array()
                .unwrap()
                .iter()
                .map(|v| v.as_f64().unwrap())
                .collect();
            let s = Sample::new(&counts).unwrap();
            let at = |k: &str| format!("{name}.{k}");
            assert_eq!(s.individuals(), case["individuals"].as_u64().unwrap());
            assert_eq!(s.richness(), case["richness"].as_u64().unwrap());
            assert_eq!(s.taxa_with(1), case["singletons"].as_u64().unwrap());
            assert_eq!(s.taxa_with(2), case["doubletons"].as_u64().unwrap());
            let tol = 1e-12;
            close(&at("hill_q1"), s.hill_q1(), &case["hill_q1"], tol, 0.0);
            close(&at("hill_q2"), s.hill_q2(), &case["hill_q2"], tol, 0.0);
            close(&at("coverage"), s.coverage(), &case["coverage"], tol, 0.0);
            let chao = s.chao1();
            close(
                &at("chao1"),
                chao.map(|c| c.estimate),
                &case["chao1"],
                tol,
                0.0,
            );
            close(
                &at("chao1_var"),
                chao.and_then(|c| c.variance),
                &case["chao1_var"],
                1e-10,
                0.0,
            );
            let ci = chao.and_then(|c| c.interval);
            close(
                &at("chao1_lo"),
                ci.map(|c| c.0),
                &case["chao1_ci"][0],
                1e-10,
                0.0,
            );
            close(
                &at("chao1_hi"),
                ci.map(|c| c.1),
                &case["chao1_ci"][1],
                1e-10,
                0.0,
            );
            for r in case["rarefied"].as_array().unwrap() {
                let m = r["m"].as_u64().unwrap();
                let got = s.rarefied(m, true).unwrap();
                let w = |k: &str| format!("{name}.rarefied[{m}].{k}");
                close(
                    &w("richness"),
                    Some(got.richness),
                    &r["richness"],
                    1e-11,
                    1e-12,
                );
                close(
                    &w("coverage"),
                    Some(got.coverage),
                    &r["coverage"],
                    1e-11,
                    1e-12,
                );
                // A variance that is exactly 0 comes out as rounding: compare the
                // sd with an absolute floor of 1e-6 (sqrt of 1e-12).
                close(&w("sd"), got.sd, &r["sd"], 1e-8, 1e-6);
            }
            for e in case["extrapolated"].as_array().unwrap() {
                let m = e["m_star"].as_f64().unwrap();
                let got = s.extrapolated(m);
                let w = |k: &str| format!("{name}.extrapolated[{m}].{k}");
                close(&w("richness"), got.map(|g| g.0), &e["richness"], 1e-11, 0.0);
                close(&w("coverage"), got.map(|g| g.1), &e["coverage"], 1e-11, 0.0);
            }
            for t in case["at_coverage"].as_array().unwrap() {
                let target = t["target"].as_f64().unwrap();
                let (size, rich) = match s.at_coverage(target) {
                    AtCoverage::Reached { size, richness, .. } => (Some(size), Some(richness)),
                    _ => (None, None),
                };
                let w = |k: &str| format!("{name}.at_coverage[{target}].{k}");
                close(&w("size"), size, &t["size"], 1e-9, 1e-12);
                close(&w("richness"), rich, &t["richness"], 1e-9, 1e-12);
            }
        }
        let auto = &fx["auto_coverage"];
        let names: Vec<&str> = auto["samples"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_str().unwrap())
            .collect();
        let samples: Vec<Sample> = names
            .iter()
            .map(|n| {
                let case = fx["samples"]
                    .as_array()
                    .unwrap()
                    .iter()
                    .find(|c| c["name"] == *n)
                    .unwrap();
                let counts: Vec<u64> = case["counts"]
                    .as_array()
                    .unwrap()
                    .iter()
                    .map(|v| v.as_u64().unwrap())
                    .collect();
                Sample::from_counts(&counts)
            })
            .collect();
        let (level, _) = common_coverage(&samples).unwrap();
        close("auto level", Some(level), &auto["level"], 1e-12, 0.0);
        for (s, p) in samples.iter().zip(auto["per_sample"].as_array().unwrap()) {
            let AtCoverage::Reached { size, richness, .. } = s.at_coverage(level) else {
                panic!("{} does not reach the common coverage", p["name"]);
            };
            close("auto size", Some(size), &p["size"], 1e-9, 0.0);
            close("auto richness", Some(richness), &p["richness"], 1e-9, 0.0);
        }
    }

    #[test]
    fn rarefied_richness_at_the_ends_is_the_sample_and_one() {
        // Identities of Hurlbert's expectation: a subsample of all n individuals
        // holds every taxon, a subsample of one holds one taxon (Hurlbert 1971).
        let s = sample(&[17, 1, 1, 2, 5, 0, 9, 3, 1, 2]);
        let all = s.rarefied(s.individuals(), true).unwrap();
        assert_eq!(all.richness, 9.0);
        assert_eq!(all.sd, Some(0.0));
        let one = s.rarefied(1, true).unwrap();
        assert!((one.richness - 1.0).abs() < 1e-12, "{}", one.richness);
        assert!(one.sd.unwrap() < 1e-6);
        assert!(s.rarefied(s.individuals() + 1, false).is_none());
    }

    #[test]
    fn extrapolation_far_beyond_the_sample_approaches_chao1() {
        // Limit identity of the extrapolation curve: as m* grows, S + f̂0 [1 − (1 −
        // f1/(n f̂0 + f1))^m*] tends to S + f̂0 = Chao1 (Chao et al. 2014).
        for c in [
            &[1u64, 1, 1, 2, 2, 4, 7, 30][..],
            &[1, 1, 1, 3, 5, 8, 12],
            &[1, 2, 3, 4],
        ] {
            let s = sample(c);
            let (far, cov) = s.extrapolated(1e7).unwrap();
            let chao = s.chao1().unwrap().estimate;
            assert!((far - chao).abs() < 1e-9 * chao, "{far} vs {chao}");
            assert!((cov - 1.0).abs() < 1e-9);
        }
    }

    #[test]
    fn coverage_rises_with_sample_size_and_meets_the_sample_coverage() {
        // The interpolated coverage increases with m and joins the extrapolated
        // curve at m = n (Chao & Jost 2012).
        let s = sample(&[1, 1, 1, 1, 2, 2, 3, 4, 6, 9, 15, 40]);
        let n = s.individuals();
        let mut last = 0.0;
        for m in 0..=n {
            let c = s.rarefied(m, false).unwrap().coverage;
            assert!(c >= last - 1e-12, "m = {m}: {c} < {last}");
            last = c;
        }
        assert_eq!(last, s.coverage().unwrap());
        assert_eq!(s.extrapolated(0.0).unwrap().1, s.coverage().unwrap());
    }

    #[test]
    fn richness_at_the_sample_coverage_is_the_observed_richness() {
        let s = sample(&[1, 1, 2, 3, 3, 8, 20]);
        match s.at_coverage(s.coverage().unwrap()) {
            AtCoverage::Reached { size, richness, .. } => {
                assert_eq!(size, s.individuals() as f64);
                assert_eq!(richness, 7.0);
            }
            other => panic!("{other:?}"),
        }
        match s.at_coverage(s.reach().unwrap() + 1e-6) {
            AtCoverage::Beyond { .. } => {}
            other => panic!("{other:?}"),
        }
        assert_eq!(sample(&[1]).at_coverage(0.5), AtCoverage::TooFew);
    }

    #[test]
    fn hurlbert_mean_and_heck_spread_match_random_subsamples() {
        // Simulation with known truth: tally's seeded subsampling (hypergeometric
        // per taxon, tested in rarefy.rs) averaged over 4000 draws gives the
        // expected richness and its standard deviation. Tolerance: 4 standard
        // errors of the mean, and 6 % for the sd (common practice, no source).
        let counts = [12.0, 1.0, 1.0, 3.0, 2.0, 7.0, 1.0, 25.0, 4.0, 2.0];
        let s = Sample::new(&counts).unwrap();
        let m = 20;
        let r = s.rarefied(m, true).unwrap();
        let y = DMatrix::from_row_slice(1, counts.len(), &counts);
        let draws = 4000;
        let rich: Vec<f64> = (0..draws)
            .map(|d| {
                let sub = rarefy(&y, m, 77, d).unwrap();
                sub.row(0).iter().filter(|v| **v > 0.0).count() as f64
            })
            .collect();
        let mean = rich.iter().sum::<f64>() / draws as f64;
        let sd = (rich.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (draws - 1) as f64).sqrt();
        let se = sd / (draws as f64).sqrt();
        assert!(
            (mean - r.richness).abs() < 4.0 * se,
            "{mean} vs {}",
            r.richness
        );
        let expected_sd = r.sd.unwrap();
        assert!(
            (sd - expected_sd).abs() < 0.06 * expected_sd,
            "{sd} vs {expected_sd}"
        );
    }

    #[test]
    fn the_curve_runs_through_the_sample_to_twice_its_size() {
        let s = sample(&[1, 1, 2, 3, 5, 8, 13]);
        let c = s.curve(10);
        let observed = c
            .iter()
            .find(|p| p.size == 33.0 && !p.extrapolated)
            .unwrap();
        assert_eq!(observed.richness, 7.0);
        assert_eq!(c.last().unwrap().size, 66.0);
        assert!(
            c.windows(2)
                .all(|w| w[1].size > w[0].size && w[1].richness >= w[0].richness)
        );
        assert!(sample(&[1]).curve(10).is_empty());
    }

    /// Individuals drawn one by one from relative abundances `p` (a multinomial sample).
    fn draw(p: &[f64], n: usize, rng: &mut rand::rngs::ChaCha8Rng) -> Sample {
        use rand::RngExt;
        let total: f64 = p.iter().sum();
        let mut counts = vec![0u64; p.len()];
        for _ in 0..n {
            let mut u = rng.random::<f64>() * total;
            let mut j = 0;
            while j + 1 < p.len() && u >= p[j] {
                u -= p[j];
                j += 1;
            }
            counts[j] += 1;
        }
        Sample::from_counts(&counts)
    }

    /// Richness of two samples at their common coverage.
    fn at_common(a: &Sample, b: &Sample) -> (f64, f64) {
        let (c, _) = common_coverage([a, b]).unwrap();
        let r = |s: &Sample| match s.at_coverage(c) {
            AtCoverage::Reached { richness, .. } => richness,
            other => panic!("{other:?}"),
        };
        (r(a), r(b))
    }

    #[test]
    fn fewer_individuals_of_the_same_community_lower_raw_richness_only() {
        // Simulation with known truth: 80 taxa with geometric-series abundances
        // (ratio 0.93), 1000 individuals before and 200 after (a fivefold fall at
        // constant composition). Raw richness must fall in every replicate; the
        // richness at the common coverage must not: over 200 seeds it is lower
        // after in about half of them (measured: 0.689 raw, 0.999 at equal
        // coverage, lower in 99). Tolerance: the 0.1 % and 99.9 % points of
        // Binomial(200, 0.5) are 77 and 123 (value from memory; scipy.stats.binom.ppf);
        // a mean ratio within 3 % of 1 (common practice, no source).
        use rand::SeedableRng;
        let p: Vec<f64> = (0..80).map(|j| 0.93_f64.powi(j)).collect();
        let (mut lower, mut raw_ratio, mut cov_ratio) = (0, 0.0, 0.0);
        let reps = 200;
        for seed in 0..reps {
            let mut rng = rand::rngs::ChaCha8Rng::seed_from_u64(seed);
            let before = draw(&p, 1000, &mut rng);
            let after = draw(&p, 200, &mut rng);
            assert!(after.richness() < before.richness(), "seed {seed}");
            raw_ratio += after.richness() as f64 / before.richness() as f64;
            let (a, b) = at_common(&before, &after);
            cov_ratio += b / a;
            if b < a {
                lower += 1;
            }
        }
        let (raw_ratio, cov_ratio) = (raw_ratio / reps as f64, cov_ratio / reps as f64);
        assert!(raw_ratio < 0.8, "raw richness ratio {raw_ratio}");
        assert!(
            (cov_ratio - 1.0).abs() < 0.03,
            "equal-coverage ratio {cov_ratio}"
        );
        assert!(
            (77..=123).contains(&lower),
            "lower after in {lower} of {reps}"
        );
    }

    #[test]
    fn losing_rare_taxa_at_constant_totals_lowers_both_readings() {
        // Simulation with known truth: the same 80 taxa, 600 individuals both
        // times, but after, the 25 rarest taxa are gone. Both raw richness and
        // richness at the common coverage fall in every one of 100 replicates.
        use rand::SeedableRng;
        let p: Vec<f64> = (0..80).map(|j| 0.95_f64.powi(j)).collect();
        let lost: Vec<f64> = p
            .iter()
            .enumerate()
            .map(|(j, v)| if j < 55 { *v } else { 0.0 })
            .collect();
        for seed in 0..100 {
            let mut rng = rand::rngs::ChaCha8Rng::seed_from_u64(1000 + seed);
            let before = draw(&p, 600, &mut rng);
            let after = draw(&lost, 600, &mut rng);
            assert!(after.richness() < before.richness(), "seed {seed}");
            let (a, b) = at_common(&before, &after);
            assert!(b < a, "seed {seed}: {b} vs {a}");
        }
    }

    #[test]
    fn whole_counts_only() {
        assert!(Sample::new(&[1.5, 2.0]).is_err());
        assert!(Sample::new(&[-1.0]).is_err());
        assert!(Sample::new(&[f64::NAN]).is_err());
        assert_eq!(Sample::new(&[0.0, 3.0, 0.0]).unwrap().richness(), 1);
    }

    #[test]
    fn the_common_coverage_is_set_by_the_poorest_sample() {
        let a = sample(&[5, 9, 14, 2, 1]);
        let b = sample(&[1, 1, 1, 2]);
        let c = sample(&[1]);
        let (level, at) = common_coverage([&a, &b, &c]).unwrap();
        assert_eq!(at, 1);
        assert_eq!(level, b.coverage().unwrap());
        assert!(matches!(b.at_coverage(level), AtCoverage::Reached { .. }));
    }
}
