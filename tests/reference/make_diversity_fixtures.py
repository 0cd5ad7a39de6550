"""Reference values for tally's diversity estimates (Hill numbers, sample
coverage, rarefaction, Chao1, extrapolation and coverage-standardised richness),
computed from the published formulas written out in NumPy/SciPy (no
community-ecology software). Writes tests/reference/diversity.json, recording
the library versions. Fixed seeds: rerunning with the same versions reproduces
the file.

Run from the repository root:  python3 tests/reference/make_diversity_fixtures.py

Notation: a sample is a vector of non-negative integer counts X_j per taxon;
taxa with X_j = 0 are ignored; n = sum X_j, S = #{X_j > 0}, f1 = #{X_j = 1},
f2 = #{X_j = 2}, A = (n - 1)/n. C(a, b) is a binomial coefficient, 0 when a < b.

Binomial ratios. The rarefaction quantities are sums of ratios C(a, m)/C(c, m).
Two evaluations are written out and must agree (see check_binomials):
  "gammaln"  log C(a, b) = gammaln(a+1) - gammaln(b+1) - gammaln(a-b+1)
             (scipy.special.gammaln), ratio = exp of the difference;
  "exact"    Python integers (math.comb and the recurrence C(a, m+1) =
             C(a, m)(a - m)/(m + 1)), every sum formed exactly and divided once,
             so each value is the correctly rounded double.
The file is written with BINOMIALS = "exact": at n ~ 5000 the gammaln route
loses ~1e-11 absolutely in each log ratio, i.e. ~1e-10 relative in E[S_m] and
up to ~1e-7 relative in its standard deviation at small m (where r_ij - r_i r_j
cancels), and it gives sd ~ 1e-6 instead of 0 where the variance is exactly 0.
Set BINOMIALS = "gammaln" to write the gammaln values instead.

Contents:
  binomial_ratios  which evaluation wrote the file ("exact" or "gammaln").
  samples          seven count vectors ("typical", "no_doubletons",
                   "no_singletons", "one_taxon", "two_singletons_only",
                   "large", "even"). For each: counts, individuals, richness,
                   singletons, doubletons, hill_q1, hill_q2, coverage (C_n),
                   chao1, chao1_var, chao1_ci; "rarefied" (m, richness, sd,
                   coverage) at m in {0, 1, 2, n//3, n//2, n-1, n};
                   "extrapolated" (m_star, richness, coverage) at m* in
                   {0, 1, n//2, n, 10**6}; "at_coverage" (target, size,
                   richness) at a few coverage targets, null beyond 2n.
  auto_coverage    the smallest sample coverage C_n over five of the samples
                   (every one of them reaches it by rarefaction), and the
                   size and richness of each of them at that coverage.

Sources:
  Hill (1973), Ecology 54:427-432; Jost (2006), Oikos 113:363-375  (Hill numbers)
  Hurlbert (1971), Ecology 52:577-586                              (rarefied richness)
  Heck, van Belle & Simberloff (1975), Ecology 56:1459-1461        (its variance)
  Chao (1987), Biometrics 43:783-791                               (Chao1, variance, interval)
  Chao & Jost (2012), Ecology 93:2533-2547                         (sample coverage)
  Chao et al. (2014), Ecol. Monogr. 84:45-67                       (extrapolation, Chao1 with A)
"""
import json
import math
import platform
from itertools import combinations
from pathlib import Path

import numpy as np
import scipy
from scipy import stats
from scipy.special import gammaln

OUT = Path(__file__).resolve().parent
VERSIONS = {
    "python": platform.python_version(),
    "numpy": np.__version__,
    "scipy": scipy.__version__,
}
BINOMIALS = "exact"  # or "gammaln"; see the module docstring
Z975 = float(stats.norm.ppf(0.975))


# --- binomial ratios, gammaln ----------------------------------------------------


def log_binom(a, b):
    """log C(a, b) by gammaln, elementwise; -inf where a < b (C(a, b) = 0)."""
    a, b = np.broadcast_arrays(np.asarray(a, dtype=float), np.asarray(b, dtype=float))
    out = np.full(a.shape, -np.inf)
    ok = a >= b
    out[ok] = gammaln(a[ok] + 1.0) - gammaln(b[ok] + 1.0) - gammaln(a[ok] - b[ok] + 1.0)
    return out


def binom_ratio(a, b, c):
    """C(a, b) / C(c, b), where C(c, b) > 0; 0 where a < b."""
    return np.exp(log_binom(a, b) - log_binom(c, b))


def curves_gammaln(x, n):
    """E[S_m] (Hurlbert) and C_m (Chao & Jost) for m = 0..n-1, by gammaln."""
    xs = np.asarray(x, dtype=float)
    sm, cm = [], []
    for m in range(n):
        # Hurlbert (1971), Ecology 52:577-586: E[S_m] = sum_j [1 - C(n-X_j, m)/C(n, m)].
        sm.append(float(np.sum(1.0 - binom_ratio(n - xs, m, n))))
        # Chao & Jost (2012), Ecology 93:2533-2547: C_m = 1 - sum_j (X_j/n) C(n-X_j, m)/C(n-1, m).
        cm.append(0.0 if m == 0 else float(1.0 - np.sum(xs / n * binom_ratio(n - xs, m, n - 1))))
    return sm, cm


def variance_gammaln(x, n, m):
    """Heck et al. (1975) variance of S_m, by gammaln."""
    xs = np.asarray(x, dtype=float)
    r = binom_ratio(n - xs, m, n)
    var = float(np.sum(r * (1.0 - r)))
    for i, j in combinations(range(len(x)), 2):
        var += 2.0 * (float(binom_ratio(n - xs[i] - xs[j], m, n)) - r[i] * r[j])
    return var


# --- binomial ratios, exact ------------------------------------------------------


def curves_exact(x, n):
    """E[S_m] and C_m for m = 0..n-1 in integer arithmetic, each rounded once."""
    S = len(x)
    c = [1] * S  # C(n - X_j, m)
    d = 1        # C(n, m)
    e = 1        # C(n - 1, m)
    sm, cm = [], []
    for m in range(n):
        # Hurlbert (1971), Ecology 52:577-586: E[S_m] = (S C(n, m) - sum_j C(n-X_j, m)) / C(n, m).
        sm.append((S * d - sum(c)) / d)
        # Chao & Jost (2012), Ecology 93:2533-2547:
        # C_m = (n C(n-1, m) - sum_j X_j C(n-X_j, m)) / (n C(n-1, m)), 1 <= m < n.
        cm.append(0.0 if m == 0 else (n * e - sum(xj * cj for xj, cj in zip(x, c))) / (n * e))
        # C(a, m+1) = C(a, m) (a - m) / (m + 1), exact in integers (0 once a <= m).
        c = [cj * (n - xj - m) // (m + 1) if n - xj > m else 0 for xj, cj in zip(x, c)]
        d = d * (n - m) // (m + 1)
        e = e * (n - 1 - m) // (m + 1)
    return sm, cm


def variance_exact(x, n, m):
    """Heck et al. (1975) variance of S_m as one exact fraction, rounded once.

    With c_j = C(n-X_j, m), c_ij = C(n-X_i-X_j, m), D = C(n, m):
    Var = [sum_j c_j (D - c_j) + 2 sum_{i<j} (c_ij D - c_i c_j)] / D^2.
    """
    D = math.comb(n, m)
    c = [math.comb(n - xj, m) for xj in x]
    num = sum(cj * (D - cj) for cj in c)
    for i, j in combinations(range(len(x)), 2):
        num += 2 * (math.comb(n - x[i] - x[j], m) * D - c[i] * c[j])
    return num / (D * D)


# --- the estimates -----------------------------------------------------------------


class Sample:
    def __init__(self, counts):
        self.counts = [int(v) for v in counts]
        self.x = [v for v in self.counts if v > 0]
        self.n = sum(self.x)
        self.S = len(self.x)
        self.f1 = sum(1 for v in self.x if v == 1)
        self.f2 = sum(1 for v in self.x if v == 2)
        self.A = (self.n - 1) / self.n
        # C_m and E[S_m] for m = 0..n: C_0 = 0, S_0 = 0; at m = n the coverage
        # estimator C_n and the observed S.
        sm, cm = (curves_exact if BINOMIALS == "exact" else curves_gammaln)(self.x, self.n)
        self.sm = np.array(sm + [float(self.S)])
        self.cm = np.array(cm + [self.coverage_ext(0)])

    # Hill (1973), Ecology 54:427-432; Jost (2006), Oikos 113:363-375:
    # 1D = exp(-sum p ln p), 2D = 1 / sum p^2, p_j = X_j / n.
    def hill(self):
        p = np.asarray(self.x, dtype=float) / self.n
        return float(np.exp(-np.sum(p * np.log(p)))), float(1.0 / np.sum(p * p))

    # Chao & Jost (2012), Ecology 93:2533-2547; Chao et al. (2014), Ecol.
    # Monogr. 84:45-67: C_{n+m*} = 1 - (f1/n) B^(m*+1), with
    # B = (n-1) f1 / ((n-1) f1 + 2 f2)       if f2 > 0,
    # B = (n-1)(f1-1) / ((n-1)(f1-1) + 2)    if f2 = 0.
    # f1 = 0 gives coverage 1 (B is then not used).
    def B(self):
        n, f1, f2 = self.n, self.f1, self.f2
        if f2 > 0:
            return (n - 1) * f1 / ((n - 1) * f1 + 2 * f2)
        return (n - 1) * (f1 - 1) / ((n - 1) * (f1 - 1) + 2)

    def coverage_ext(self, m_star):
        """Coverage of n + m* individuals (m* >= 0, may be non-integer); m* = 0 is C_n."""
        if self.f1 == 0:
            return 1.0
        return float(1.0 - (self.f1 / self.n) * self.B() ** (m_star + 1))

    def richness_sd(self, m):
        # Heck, van Belle & Simberloff (1975), Ecology 56:1459-1461:
        # Var = sum_j r_j (1 - r_j) + 2 sum_{i<j} (r_ij - r_i r_j),
        # r_j = C(n-X_j, m)/C(n, m), r_ij = C(n-X_i-X_j, m)/C(n, m); sd = sqrt(max(Var, 0)).
        var = (variance_exact if BINOMIALS == "exact" else variance_gammaln)(self.x, self.n, m)
        return float(np.sqrt(max(var, 0.0)))

    # Chao (1987), Biometrics 43:783-791, bias-corrected form with A = (n-1)/n
    # as in Chao et al. (2014), Ecol. Monogr. 84:45-67:
    # f2 > 0: S + A f1^2 / (2 f2);  f2 = 0: S + A f1 (f1 - 1) / 2.
    def chao1(self):
        f1, f2, A = self.f1, self.f2, self.A
        if f2 > 0:
            return self.S + A * f1 * f1 / (2.0 * f2)
        return self.S + A * f1 * (f1 - 1) / 2.0

    # Variance of Chao1, Chao (1987), Biometrics 43:783-791, with the A factor
    # (from memory; not checked against the paper):
    # f2 > 0: f2 [ (A/2)(f1/f2)^2 + A^2 (f1/f2)^3 + (A^2/4)(f1/f2)^4 ];
    # f2 = 0, f1 > 0: A f1(f1-1)/2 + A^2 f1 (2 f1 - 1)^2 / 4 - A^2 f1^4 / (4 chao1);
    # f1 = 0: none, whatever f2 (the f2 > 0 formula would give 0).
    def chao1_var(self):
        f1, f2, A = self.f1, self.f2, self.A
        if f1 == 0:
            return None
        if f2 > 0:
            q = f1 / f2
            return f2 * (A / 2.0 * q**2 + A * A * q**3 + A * A / 4.0 * q**4)
        return (A * f1 * (f1 - 1) / 2.0
                + A * A * f1 * (2 * f1 - 1) ** 2 / 4.0
                - A * A * f1**4 / (4.0 * self.chao1()))

    # Log-normal 95 % interval, Chao (1987), Biometrics 43:783-791:
    # T = chao1 - S, K = exp(z sqrt(ln(1 + var / T^2))), z = norm.ppf(0.975),
    # [S + T/K, S + T K]; none when T <= 0 or there is no variance.
    def chao1_ci(self):
        T = self.chao1() - self.S
        var = self.chao1_var()
        if var is None or T <= 0:
            return None
        K = np.exp(Z975 * np.sqrt(np.log(1.0 + var / T**2)))
        return [float(self.S + T / K), float(self.S + T * K)]

    # Chao et al. (2014), Ecol. Monogr. 84:45-67, extrapolated richness:
    # S(n + m*) = S + f0 [1 - (1 - f1/(n f0 + f1))^m*], f0 = chao1 - S;
    # S when f0 = 0. The power is evaluated as exp(m* log1p(-x)).
    def richness_ext(self, m_star):
        f0 = self.chao1() - self.S
        if f0 <= 0:
            return float(self.S)
        x = self.f1 / (self.n * f0 + self.f1)
        return float(self.S + f0 * (1.0 - np.exp(m_star * np.log1p(-x))))

    # Coverage-standardised richness (Chao & Jost 2012, Ecology 93:2533-2547):
    # linear interpolation between integer sizes up to n, the continuous
    # extrapolation from n to 2n, none beyond 2n.
    def at_coverage(self, target):
        n, cm, sm = self.n, self.cm, self.sm
        if target <= cm[n]:
            # The smallest m with C_{m+1} >= target, so C_m < target <= C_{m+1}
            # (C_0 = 0 < target): the first size that reaches the target.
            m = int(np.argmax(cm[1:] >= target))
            size = m + (target - cm[m]) / (cm[m + 1] - cm[m])
            richness = sm[m] + (size - m) * (sm[m + 1] - sm[m])
            return float(size), float(richness)
        if target <= self.coverage_ext(n):
            # Solve (f1/n) B^(m*+1) = 1 - target for m* (here f1 > 0, 0 < B < 1).
            m_star = math.log((1.0 - target) * n / self.f1) / math.log(self.B()) - 1.0
            return float(n + m_star), self.richness_ext(m_star)
        return None, None


# --- self-checks -------------------------------------------------------------------


def check_binomials(s, ms):
    """The gammaln and exact evaluations agree (to gammaln's accuracy)."""
    se, ce = curves_exact(s.x, s.n)
    sg, cg = curves_gammaln(s.x, s.n)
    assert np.allclose(sg, se, rtol=1e-8, atol=1e-12)
    assert np.allclose(cg, ce, rtol=1e-8, atol=1e-12)
    for m in ms:
        ve, vg = variance_exact(s.x, s.n, m), variance_gammaln(s.x, s.n, m)
        assert abs(ve - vg) <= 1e-6 * max(ve, 1.0), (m, ve, vg)
    assert np.all(np.diff(s.cm) >= 0.0), "coverage must not decrease with m"
    assert np.all(np.diff(s.sm) >= 0.0), "richness must not decrease with m"
    assert s.coverage_ext(0) == s.cm[s.n] and s.richness_ext(0) == s.S


# --- samples -------------------------------------------------------------------------


def typical_counts():
    # Log-series abundances (parameter 0.95), 30 taxa.
    rng = np.random.default_rng(20260703)
    return [int(v) for v in rng.logseries(0.95, size=30)]


def large_counts():
    # Log-normal expected abundances (sigma 2) scaled to 5000 individuals,
    # Poisson draws; 80 taxa, a few of which draw 0.
    rng = np.random.default_rng(20260712)
    w = rng.lognormal(0.0, 2.0, size=80)
    return [int(v) for v in rng.poisson(5000.0 * w / w.sum())]


def samples():
    return {
        "typical": typical_counts(),
        "no_doubletons": [1, 1, 1, 3, 5, 8, 0, 12],
        "no_singletons": [2, 3, 5, 10, 0, 4],
        "one_taxon": [7],
        "two_singletons_only": [1, 1],
        "large": large_counts(),
        "even": [6] * 12,
    }


def coverage_targets(s):
    """0.5 C_1, 0.5 C_n, 0.9 C_n, C_n, midway to C(2n), midway beyond C(2n)."""
    c_1, c_n, c_2n = s.cm[1], s.cm[s.n], s.coverage_ext(s.n)
    targets = [0.5 * c_n, 0.9 * c_n, c_n]
    if c_1 > 0:
        targets.append(0.5 * c_1)
    if c_2n > c_n:
        targets.append((c_n + c_2n) / 2.0)
    if c_2n < 1.0:
        targets.append(c_2n + (1.0 - c_2n) / 2.0)  # beyond 2n: null
    out = []
    for t in sorted(targets):  # positive and distinct (to 1e-12 relative)
        if t > 0 and not any(math.isclose(t, u, rel_tol=1e-12) for u in out):
            out.append(float(t))
    return out


def describe(name, s):
    n = s.n
    ms = [m for m in sorted({0, 1, 2, n // 3, n // 2, n - 1, n}) if 0 <= m <= n]
    check_binomials(s, ms)
    q1, q2 = s.hill()
    var = s.chao1_var()
    rarefied = [
        {"m": m, "richness": float(s.sm[m]), "sd": s.richness_sd(m), "coverage": float(s.cm[m])}
        for m in ms
    ]
    extrapolated = [
        {"m_star": k, "richness": s.richness_ext(k), "coverage": s.coverage_ext(k)}
        for k in sorted({0, 1, n // 2, n, 10**6})
    ]
    at_coverage = []
    for t in coverage_targets(s):
        size, richness = s.at_coverage(t)
        at_coverage.append({"target": t, "size": size, "richness": richness})
    if s.coverage_ext(n) < 1.0:
        assert at_coverage[-1]["size"] is None, "the target beyond 2n must be null"
    return {
        "name": name,
        "counts": s.counts,
        "individuals": n,
        "richness": s.S,
        "singletons": s.f1,
        "doubletons": s.f2,
        "hill_q1": q1,
        "hill_q2": q2,
        "coverage": float(s.cm[n]),
        "chao1": float(s.chao1()),
        "chao1_var": None if var is None else float(var),
        "chao1_ci": s.chao1_ci(),
        "rarefied": rarefied,
        "extrapolated": extrapolated,
        "at_coverage": at_coverage,
    }


def auto_coverage(fitted):
    # One coverage for several samples: the smallest sample coverage C_n, so
    # that every listed sample is compared on its rarefaction curve.
    names = ["typical", "no_doubletons", "no_singletons", "large", "even"]
    level = min(fitted[k].coverage_ext(0) for k in names)
    per_sample = []
    for k in names:
        size, richness = fitted[k].at_coverage(level)
        per_sample.append({"name": k, "size": size, "richness": richness})
    return {"samples": names, "level": float(level), "per_sample": per_sample}


def main():
    fitted = {name: Sample(counts) for name, counts in samples().items()}
    typ, large = fitted["typical"], fitted["large"]
    assert 150 <= typ.n <= 250 and typ.f1 >= 3 and typ.f2 >= 2
    assert 4500 <= large.n <= 5500 and large.f1 >= 1 and large.f2 >= 1
    records = [describe(name, s) for name, s in fitted.items()]
    payload = {
        "versions": VERSIONS,
        "binomial_ratios": BINOMIALS,
        "samples": records,
        "auto_coverage": auto_coverage(fitted),
    }
    (OUT / "diversity.json").write_text(json.dumps(payload, indent=1) + "\n")

    r = next(rec for rec in records if rec["name"] == "no_doubletons")
    print(f"no_doubletons: n={r['individuals']} S={r['richness']} f1={r['singletons']} "
          f"f2={r['doubletons']} C_n={r['coverage']:.10g}")
    print(f"  hill q1={r['hill_q1']:.10g} q2={r['hill_q2']:.10g} chao1={r['chao1']:.10g} "
          f"var={r['chao1_var']:.10g} ci={[round(v, 8) for v in r['chao1_ci']]}")
    for row in r["rarefied"]:
        print(f"  rarefied m={row['m']}: S={row['richness']:.10g} sd={row['sd']:.10g} "
              f"C={row['coverage']:.10g}")
    for row in r["extrapolated"]:
        print(f"  extrapolated m*={row['m_star']}: S={row['richness']:.10g} "
              f"C={row['coverage']:.10g}")
    for row in r["at_coverage"]:
        print(f"  at coverage {row['target']:.10g}: size={row['size']} richness={row['richness']}")


if __name__ == "__main__":
    main()
