"""Reference values for tally's per-taxon trends (analysis::trend::taxon_trends):
each taxon's Poisson log-linear model  log mu = site + b*year + log(effort),
fitted by statsmodels' GLM (Poisson family, log link, offset), with the slope's
standard error scaled by the Pearson dispersion (fit(scale="X2")), and the pooled
yearly rates sum(count)/sum(effort) computed with numpy.

Sites where a taxon caught nothing are left out of that taxon's fit (their site
effect has no finite estimate; tally leaves them out the same way).

Writes tests/reference/taxon_trends.json; run from the repository root:

    python3 tests/reference/make_taxon_trend_fixtures.py

Rerunning reproduces the file byte for byte (fixed seed, fixed formatting).
"""

import json
import platform

import numpy as np
import statsmodels
import statsmodels.api as sm


def main():
    rng = np.random.default_rng(20261203)
    sites, years = 6, np.arange(2010, 2018)
    site = np.repeat(np.arange(sites), len(years))
    year = np.tile(years, sites)
    n = len(site)
    effort = rng.uniform(0.5, 2.0, size=n).round(2)
    level = rng.normal(0.0, 0.6, size=sites)[site]
    slopes = [-0.20, 0.0, 0.12, -0.05, 0.3]
    bases = [3.0, 2.0, 1.0, 0.5, -0.5]
    cols = []
    for b0, b in zip(bases, slopes):
        mu = effort * np.exp(b0 + level + b * (year - year[0]) + rng.normal(0, 0.2, size=n))
        cols.append(rng.poisson(mu).astype(float))
    # A taxon absent from two sites.
    rare = rng.poisson(effort * 1.5).astype(float)
    rare[np.isin(site, [1, 4])] = 0.0
    cols.append(rare)
    # A taxon caught only in the first year, at one site: no finite slope.
    first = np.zeros(n)
    first[(site == 2) & (year == years[0])] = 4.0
    cols.append(first)
    y = np.column_stack(cols)
    taxa = []
    for j in range(y.shape[1]):
        c = y[:, j]
        rates = [float(c[year == t].sum() / effort[year == t].sum()) for t in years]
        entry = {"column": j, "yearly_rates": rates}
        keep = np.isin(site, [s for s in range(sites) if c[site == s].sum() > 0])
        seen = sorted(set(year[keep & (c > 0)]))
        if j == y.shape[1] - 1:
            entry["finite"] = False
        else:
            s = site[keep]
            levels = sorted(set(s))
            x = np.column_stack(
                [np.ones(keep.sum())]
                + [(s == lv).astype(float) for lv in levels[1:]]
                + [(year[keep] - years[0]).astype(float)]
            )
            fit = sm.GLM(c[keep], x, family=sm.families.Poisson(), offset=np.log(effort[keep])).fit(
                scale="X2", tol=1e-13
            )
            entry.update(
                {
                    "finite": True,
                    "years_seen": len(seen),
                    "slope_log_statsmodels": float(fit.params[-1]),
                    "se_log_statsmodels_x2": float(fit.bse[-1]),
                    "dispersion_statsmodels_x2": float(fit.scale),
                }
            )
        taxa.append(entry)
    out = {
        "generator": "tests/reference/make_taxon_trend_fixtures.py",
        "versions": {
            "python": platform.python_version(),
            "numpy": np.__version__,
            "statsmodels": statsmodels.__version__,
        },
        "site": site.tolist(),
        "year": year.tolist(),
        "effort": effort.tolist(),
        "counts": y.tolist(),
        "taxa": taxa,
    }
    with open("tests/reference/taxon_trends.json", "w") as fh:
        json.dump(out, fh, indent=1, sort_keys=True)
        fh.write("\n")


if __name__ == "__main__":
    main()
