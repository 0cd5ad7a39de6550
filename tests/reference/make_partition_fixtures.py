"""Reference values for tally's size/shape partition with the Euclidean distance,
where db-RDA reduces to ordinary least squares: the fraction of the column-centred
data Y explained by a design X is R^2 = sum_j ESS_j / sum_j TSS_j over the columns
of Y, each column fitted by statsmodels OLS on [1, X] (Legendre & Anderson 1999;
McArdle & Anderson 2001). The four fractions follow Borcard, Legendre & Drapeau
(1992) with Ezekiel-adjusted R^2 (statsmodels' rsquared_adj formula, with the model
df taken from the OLS fit) per Peres-Neto et al. (2006).

Size S = ln(row total of the counts) (or the total itself); shape P = the row
profiles of the counts with the last column dropped (the dropped column is the
intercept minus the others, so the projector is the same). Y is the counts after
the transform named in each case. Writes tests/reference/partition_ols.json with
the library versions. Fixed seeds: rerunning reproduces the file.

Run from the repository root:  python3 tests/reference/make_partition_fixtures.py
"""
import json
import platform
from pathlib import Path

import numpy as np
import statsmodels
import statsmodels.api as sm

OUT = Path(__file__).resolve().parent
VERSIONS = {
    "python": platform.python_version(),
    "numpy": np.__version__,
    "statsmodels": statsmodels.__version__,
}


def multivariate_r2(y, x):
    """Pooled R^2 of every column of y on [1, x] and the model df of the fit."""
    yc = y - y.mean(axis=0)
    design = sm.add_constant(x, has_constant="add")
    ess = 0.0
    tss = 0.0
    df_model = None
    for j in range(yc.shape[1]):
        fit = sm.OLS(yc[:, j], design).fit()
        ess += fit.ess
        tss += fit.centered_tss
        df_model = fit.df_model
    return ess / tss, int(round(df_model))


def adjusted(r2, n, m):
    # statsmodels: rsquared_adj = 1 - (nobs - 1) / df_resid * (1 - rsquared), df_resid = n - m - 1
    return 1.0 - (n - 1) / (n - m - 1) * (1.0 - r2)


def fractions(r2s, r2p, r2b):
    return {
        "size_only": r2b - r2p,
        "shared": r2s + r2p - r2b,
        "shape_only": r2b - r2s,
        "unexplained": 1.0 - r2b,
    }


def case(name, seed, n, p, transform, size):
    rng = np.random.default_rng(seed)
    # Poisson-gamma counts with site effects on both totals and composition.
    base = rng.gamma(2.0, 10.0, size=p)
    scale = np.exp(rng.normal(0.0, 0.6, size=n))
    mix = rng.gamma(3.0, 1.0 / 3.0, size=(n, p))
    counts = rng.poisson(np.outer(scale, base) * mix).astype(float)
    counts[counts.sum(axis=1) == 0, 0] = 1.0
    totals = counts.sum(axis=1)
    s = (np.log(totals) if size == "log-total" else totals).reshape(-1, 1)
    prof = (counts / totals[:, None])[:, :-1]
    y = {"none": counts, "log1p": np.log1p(counts), "sqrt": np.sqrt(counts)}[transform]
    r2s, ms = multivariate_r2(y, s)
    r2p, mp = multivariate_r2(y, prof)
    r2b, mb = multivariate_r2(y, np.hstack([s, prof]))
    return {
        "name": name,
        "transform": transform,
        "size": size,
        "counts": counts.tolist(),
        "r2": {"size": r2s, "shape": r2p, "both": r2b},
        "df": {"size": ms, "shape": mp, "both": mb},
        "fractions": fractions(r2s, r2p, r2b),
        "adjusted_fractions": fractions(adjusted(r2s, n, ms), adjusted(r2p, n, mp), adjusted(r2b, n, mb)),
    }


def main():
    cases = [
        case("raw-30x5", 20261201, 30, 5, "none", "log-total"),
        case("log1p-40x6", 20261202, 40, 6, "log1p", "log-total"),
        case("sqrt-25x4-total", 20261203, 25, 4, "sqrt", "total"),
    ]
    payload = {
        "generator": "tests/reference/make_partition_fixtures.py",
        "versions": VERSIONS,
        "what": "Euclidean size/shape partition = OLS R^2 of centred Y on size, shape, both",
        "cases": cases,
    }
    (OUT / "partition_ols.json").write_text(json.dumps(payload, indent=1) + "\n")


if __name__ == "__main__":
    main()
