"""Reference values for tally's log-linear count model (src/analysis/count_model.rs),
computed with general-purpose libraries only (NumPy, statsmodels). Writes
tests/reference/count_model.json, recording the library versions. Fixed seeds:
rerunning with the same versions reproduces the file.

Run from the repository root:  python3 tests/reference/make_count_fixtures.py

Every case holds the counts y, the effort e, the design matrix X (rows, built
explicitly in NumPy, treatment coding with the first level as reference) and the
results of
    sm.GLM(y, X, family=sm.families.Poisson(), offset=np.log(e)).fit(tol=1e-14)
(statsmodels): params, bse, deviance, pearson_chi2, df_resid, and bse_x2, the
standard errors of fit(scale="X2", tol=1e-14) (Pearson dispersion). The tight
tolerance puts the values at the maximum likelihood estimate rather than where
IRLS stopped: statsmodels takes bse from the weights of its last WLS step, one
step behind the returned params, so the default fit (tol=1e-8 on the deviance)
can differ in bse by ~1e-5 relative. The default fit is checked here to agree
with the recorded values within 1e-4.

Contents:
  one_factor    one factor with 2 groups, 30 rows, about a third zeros; also the
                pooled rates sum(y)/sum(e) per group (checked here: exp of the
                intercept is the rate of group 0, exp of the group coefficient
                their ratio).
  baci_reduced  a BACI-like panel, 6 sites (0-2 control, 3-5 impact) x 8 years
                (0-3 before, 4-7 after), counts Poisson with a gamma(2, 1/2)
                multiplier (overdispersed, dispersion > 1); log mu = site + year.
  baci_full     the same data, log mu = site + year + gamma * impact * after.
  site_year     site effects + centred numeric year on an unbalanced panel
                (5 sites, 10 years, some site-years missing); site 4 is rare and
                has zeros in several years.
  score_test    the Rao (1948) score statistic of adding the impact x after
                column to baci_reduced, computed in NumPy from the formula
                U = e'(y - mu), V = e'We - e'WX (X'WX)^-1 X'We, S = U^2 / V,
                W = diag(mu), on the statsmodels reduced fit.
"""
import json
import platform
from pathlib import Path

import numpy as np
import pandas as pd
import scipy
import statsmodels
import statsmodels.api as sm

OUT = Path(__file__).resolve().parent
VERSIONS = {
    "python": platform.python_version(),
    "numpy": np.__version__,
    "scipy": scipy.__version__,
    "statsmodels": statsmodels.__version__,
    "pandas": pd.__version__,
}


def dummies(codes, n_levels):
    """Treatment-coded indicator columns of levels 1..n_levels-1."""
    codes = np.asarray(codes)
    return np.column_stack([(codes == k).astype(float) for k in range(1, n_levels)])


def glm(y, x, effort):
    model = sm.GLM(y, x, family=sm.families.Poisson(), offset=np.log(effort))
    fit = model.fit(tol=1e-14, maxiter=1000)
    assert fit.converged
    default = model.fit()
    assert default.converged
    np.testing.assert_allclose(default.params, fit.params, rtol=1e-4, atol=1e-8)
    np.testing.assert_allclose(default.bse, fit.bse, rtol=1e-4)
    np.testing.assert_allclose(default.deviance, fit.deviance, rtol=1e-9)
    x2 = model.fit(scale="X2", tol=1e-14, maxiter=1000)
    return fit, {
        "y": [float(v) for v in y],
        "effort": [float(v) for v in effort],
        "x": x.tolist(),
        "params": fit.params.tolist(),
        "bse": fit.bse.tolist(),
        "bse_x2": x2.bse.tolist(),
        "deviance": float(fit.deviance),
        "pearson_chi2": float(fit.pearson_chi2),
        "df_resid": int(round(fit.df_resid)),
        "oracle": "statsmodels GLM Poisson, offset log(effort)",
    }


def one_factor():
    rng = np.random.default_rng(20261401)
    n = 30
    codes = np.repeat([0, 1], [14, 16])
    effort = rng.uniform(0.3, 2.5, n)
    rate = np.where(codes == 0, 0.8, 1.9)
    y = rng.poisson(rate * effort).astype(float)
    assert 6 <= (y == 0).sum() <= 14, (y == 0).sum()
    x = np.column_stack([np.ones(n), dummies(codes, 2)])
    fit, out = glm(y, x, effort)
    rates = [float(y[codes == k].sum() / effort[codes == k].sum()) for k in range(2)]
    assert np.isclose(np.exp(fit.params[0]), rates[0], rtol=1e-9)
    assert np.isclose(np.exp(fit.params[1]), rates[1] / rates[0], rtol=1e-9)
    out["codes"] = codes.tolist()
    out["pooled_rates"] = rates
    return out


def baci():
    rng = np.random.default_rng(20261402)
    sites, years = 6, 8
    site = np.repeat(np.arange(sites), years)
    year = np.tile(np.arange(years), sites)
    impact = (site >= 3).astype(float)
    after = (year >= 4).astype(float)
    effort = rng.uniform(0.5, 2.0, sites * years)
    site_eff = rng.normal(0.0, 0.5, sites)
    year_eff = rng.normal(0.0, 0.3, years)
    eta = np.log(1.2) + site_eff[site] + year_eff[year] - 0.7 * impact * after
    mult = rng.gamma(2.0, 0.5, sites * years)
    y = rng.poisson(np.exp(eta) * effort * mult).astype(float)
    assert (y == 0).sum() >= 5, (y == 0).sum()
    inter = impact * after
    xr = np.column_stack([np.ones(sites * years), dummies(site, sites), dummies(year, years)])
    xf = np.column_stack([xr, inter])
    red_fit, red = glm(y, xr, effort)
    _, full = glm(y, xf, effort)
    assert red["pearson_chi2"] / red["df_resid"] > 1.0
    assert full["pearson_chi2"] / full["df_resid"] > 1.0
    mu = red_fit.mu
    w = mu
    u = inter @ (y - mu)
    xtwx = xr.T @ (w[:, None] * xr)
    xtwe = xr.T @ (w * inter)
    v = inter @ (w * inter) - xtwe @ np.linalg.solve(xtwx, xtwe)
    score = {
        "case": "baci_reduced",
        "extra": inter.tolist(),
        "statistic": float(u * u / v),
        "oracle": "NumPy, Rao (1948) score statistic on the statsmodels reduced fit",
    }
    return red, full, score


def site_year():
    rng = np.random.default_rng(20261403)
    sites, years = 5, 10
    site_rate = np.array([2.0, 1.2, 3.5, 0.9, 0.25])
    rows_site, rows_year = [], []
    for s in range(sites):
        for t in range(years):
            if s != 4 and rng.random() < 0.15:
                continue
            rows_site.append(s)
            rows_year.append(t)
    site = np.array(rows_site)
    year = np.array(rows_year, dtype=float)
    n = len(site)
    assert n < sites * years
    effort = rng.uniform(0.4, 3.0, n)
    yc = year - year.mean()
    mu = site_rate[site] * np.exp(-0.06 * yc) * effort
    y = rng.poisson(mu).astype(float)
    assert (y[site == 4] == 0).sum() >= 2, y[site == 4]
    x = np.column_stack([np.ones(n), dummies(site, sites), yc])
    _, out = glm(y, x, effort)
    out["codes"] = site.tolist()
    out["year"] = year.astype(int).tolist()
    return out


def main():
    red, full, score = baci()
    payload = {
        "versions": VERSIONS,
        "cases": {
            "one_factor": one_factor(),
            "baci_reduced": red,
            "baci_full": full,
            "site_year": site_year(),
        },
        "score_test": score,
    }
    (OUT / "count_model.json").write_text(json.dumps(payload, indent=1, sort_keys=True) + "\n")


if __name__ == "__main__":
    main()
