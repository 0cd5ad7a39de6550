"""Reference values for tally's trend kernel (src/analysis/trend.rs), computed with
general-purpose libraries only (NumPy, SciPy, statsmodels). Writes
tests/reference/trend.json, recording the library versions. Fixed seeds:
rerunning with the same versions reproduces the file.

Run from the repository root:  python3 tests/reference/make_trend_fixtures.py

Contents:
  t_quantiles  scipy.stats.t.ppf(level, df) for the period intervals.
  ols          an unbalanced site x year panel (5 sites, 9 years, 6 site-years
               missing): ordinary least squares of y on site dummies + year with
               statsmodels; slope, its standard error, the partial F of year
               given site (anova of nested models), residual df.
  binomial     quantiles used as tolerances of the simulation tests.
"""
import json
import platform
from pathlib import Path

import numpy as np
import pandas as pd
import scipy
import statsmodels
import statsmodels.formula.api as smf
from scipy import stats
from statsmodels.stats.anova import anova_lm

OUT = Path(__file__).resolve().parent
VERSIONS = {
    "python": platform.python_version(),
    "numpy": np.__version__,
    "scipy": scipy.__version__,
    "statsmodels": statsmodels.__version__,
    "pandas": pd.__version__,
}


def t_quantiles():
    rows = []
    for df in [1, 2, 3, 4, 5, 7, 10, 17, 30, 60, 105, 1000]:
        for level in [0.6, 0.9, 0.975, 0.995]:
            rows.append({"df": df, "level": level, "ppf": float(stats.t.ppf(level, df))})
    return rows


def ols():
    rng = np.random.default_rng(20260601)
    rows = []
    for s in range(5):
        site_effect = rng.normal(0.0, 0.5)
        for y in range(2010, 2019):
            if rng.random() < 0.14:
                continue
            value = 4.0 + site_effect - 0.04 * (y - 2010) + rng.normal(0.0, 0.2)
            rows.append({"site": f"s{s}", "year": y, "y": value})
    df = pd.DataFrame(rows)
    full = smf.ols("y ~ C(site) + year", data=df).fit()
    reduced = smf.ols("y ~ C(site)", data=df).fit()
    table = anova_lm(reduced, full)
    ci = full.conf_int(alpha=0.05).loc["year"]
    return {
        "site": df["site"].tolist(),
        "year": df["year"].astype(int).tolist(),
        "y": df["y"].tolist(),
        "slope": float(full.params["year"]),
        "se": float(full.bse["year"]),
        "ci_low": float(ci[0]),
        "ci_high": float(ci[1]),
        "df_resid": int(full.df_resid),
        "f_year_given_site": float(table["F"].iloc[1]),
    }


def binomial():
    out = []
    for n, p in [(20, 0.95), (200, 0.05), (200, 1 - 0.95**2)]:
        out.append({
            "n": n,
            "p": p,
            "q001": int(stats.binom.ppf(0.001, n, p)),
            "q999": int(stats.binom.ppf(0.999, n, p)),
        })
    return out


def main():
    payload = {
        "versions": VERSIONS,
        "t_quantiles": t_quantiles(),
        "ols": ols(),
        "binomial": binomial(),
    }
    (OUT / "trend.json").write_text(json.dumps(payload, indent=1) + "\n")


if __name__ == "__main__":
    main()
