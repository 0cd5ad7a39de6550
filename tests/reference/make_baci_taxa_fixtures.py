"""Reference values for tally's per-taxon before/after x control/impact contrast
(analysis::taxa::baci_contrast), from the definitions below written out in NumPy.
Writes tests/reference/baci_taxa.json; fixed seed, so rerunning with the same
versions reproduces the file. Run from the repository root:

    python3 tests/reference/make_baci_taxa_fixtures.py

Notation: rows i with site s(i), period after(i), effort e_i > 0, counts Y[i, j];
a site's role is impact or control. Cells: control before (CB), control after
(CA), impact before (IB), impact after (IA).
  pooled rate     R_c[j] = sum_{i in c} Y[i,j] / sum_{i in c} e_i
  ratio of ratios (R_IA/R_IB) / (R_CA/R_CB), null when a rate is 0
  share change    100 [(S_IA - S_IB) - (S_CA - S_CB)], S_c = R_c / sum_k R_c[k]
  Hellinger       h_i = sqrt(Y[i] / t_i) for rows with t_i > 0 (Legendre &
                  Gallagher 2001, Oecologia 129:271-280)
  site shift      z_s = mean h_i after - mean h_i before (sites with rows with
                  organisms in both periods)
  shape contrib.  (mean_impact z - mean_control z)_j^2 / sum_k (...)_k^2
  size contrib.   ((R_IA - R_IB) - (R_CA - R_CB))_j / sum_k (...)_k
The only published source is the Hellinger transformation itself.

The case: 6 sites (3 impact), 4 years (2 before, 2 after), 2 visits a year,
8 taxa; effort uniform on [0.5, 2.5]; Poisson counts with mean
effort x 10 * 0.75**j x site level; at the impact sites after, taxon 0 falls to
0.3 and taxon 3 rises to 2.5 times its rate. One impact row after is set to all
zeros (it keeps its effort in the rates and is skipped by the shifts); taxon 7
is never caught at the control sites before (its ratio of ratios is null).
"""
import json
import platform
from pathlib import Path

import numpy as np

OUT = Path(__file__).resolve().parent


def main():
    rng = np.random.default_rng(20261204)
    sites, years, visits, ntaxa = 6, 4, 2, 8
    impact_site = np.array([False, True, False, True, False, True])
    rows = [(s, y) for s in range(sites) for y in range(years) for _ in range(visits)]
    site = np.array([r[0] for r in rows])
    year = np.array([r[1] for r in rows])
    after = year >= 2
    n = len(rows)
    effort = rng.uniform(0.5, 2.5, size=n).round(3)
    level = rng.uniform(0.6, 1.6, size=sites)
    base = 10.0 * 0.75 ** np.arange(ntaxa)
    mu = effort[:, None] * base[None, :] * level[site][:, None]
    change = np.ones((n, ntaxa))
    ia = impact_site[site] & after
    change[ia, 0] = 0.3
    change[ia, 3] = 2.5
    Y = rng.poisson(mu * change).astype(np.int64)
    Y[np.where(ia)[0][1]] = 0
    Y[(~impact_site[site]) & (~after), 7] = 0
    Y[0, 7] = 0
    assert Y[:, 7].sum() > 0

    cells = {
        "CB": (~impact_site[site]) & (~after),
        "CA": (~impact_site[site]) & after,
        "IB": impact_site[site] & (~after),
        "IA": impact_site[site] & after,
    }
    R = {c: Y[m].sum(0) / effort[m].sum() for c, m in cells.items()}
    S = {c: R[c] / R[c].sum() for c in cells}
    with np.errstate(divide="ignore", invalid="ignore"):
        q = (R["IA"] / R["IB"]) / (R["CA"] / R["CB"])
    ok = (R["IA"] > 0) & (R["IB"] > 0) & (R["CA"] > 0) & (R["CB"] > 0)
    share_change = 100.0 * ((S["IA"] - S["IB"]) - (S["CA"] - S["CB"]))

    t = Y.sum(1)
    h = np.zeros(Y.shape)
    h[t > 0] = np.sqrt(Y[t > 0] / t[t > 0, None])
    shifts = {True: [], False: []}
    for s in range(sites):
        b = (site == s) & (~after) & (t > 0)
        a = (site == s) & after & (t > 0)
        if b.any() and a.any():
            shifts[bool(impact_site[s])].append(h[a].mean(0) - h[b].mean(0))
    diff = np.mean(shifts[True], axis=0) - np.mean(shifts[False], axis=0)
    d2 = float((diff ** 2).sum())
    shape = diff ** 2 / d2
    dsize = (R["IA"] - R["IB"]) - (R["CA"] - R["CB"])
    size = dsize / dsize.sum()
    assert abs(shape.sum() - 1) < 1e-12 and abs(size.sum() - 1) < 1e-12

    present = [j for j in range(ntaxa) if Y[:, j].sum() > 0]
    out = {
        "generator": "tests/reference/make_baci_taxa_fixtures.py",
        "versions": {"python": platform.python_version(), "numpy": np.__version__},
        "site": site.tolist(),
        "year": year.tolist(),
        "after": after.tolist(),
        "impact": impact_site.tolist(),
        "effort": effort.tolist(),
        "counts": Y.tolist(),
        "shape_distance_sq": d2,
        "taxa": [
            {
                "column": j,
                "rates_cb_ca_ib_ia": [float(R[c][j]) for c in ("CB", "CA", "IB", "IA")],
                "ratio_of_ratios": float(q[j]) if ok[j] else None,
                "share_change_pp": float(share_change[j]),
                "shape_contribution": float(shape[j]),
                "size_contribution": float(size[j]),
            }
            for j in present
        ],
    }
    with open(OUT / "baci_taxa.json", "w") as fh:
        json.dump(out, fh, indent=1, sort_keys=True)
        fh.write("\n")


if __name__ == "__main__":
    main()
