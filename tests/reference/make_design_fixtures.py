"""Reference values for tally's permutation designs for revisited sites
(src/analysis/permutation.rs, Scheme::WholeSites), computed with NumPy and SciPy only.
Writes tests/reference/designs.json, recording the library versions. Fixed seeds:
rerunning with the same versions reproduces the file.

Run from the repository root:  python3 tests/reference/make_design_fixtures.py

Contents:
  whole_sites  6 sites (3 'fenced', 3 'open') visited 2, 3, 4, 2, 3 and 5 times
               (19 rows), 3 variables; Euclidean distances (scipy.spatial.distance.pdist);
               the one-way pseudo-F (Anderson 2001, Austral Ecology 26:32-46, written
               out in NumPy) for each of the C(6,3) = 20 relabellings of the sites
               (itertools.combinations), and the exact p-value
               #{F* >= F_obs} / 20, the observed labelling included.
  binomial     quantiles used as tolerances of the simulation tests.
"""
import itertools
import json
import platform
from pathlib import Path

import numpy as np
import scipy
from scipy import stats
from scipy.spatial.distance import pdist, squareform

OUT = Path(__file__).resolve().parent
VERSIONS = {
    "python": platform.python_version(),
    "numpy": np.__version__,
    "scipy": scipy.__version__,
}


def pseudo_f(d2, labels):
    n = len(labels)
    levels = sorted(set(labels))
    a = len(levels)
    sst = d2[np.triu_indices(n, 1)].sum() / n
    ssw = 0.0
    for g in levels:
        idx = [i for i in range(n) if labels[i] == g]
        sub = d2[np.ix_(idx, idx)]
        ssw += sub[np.triu_indices(len(idx), 1)].sum() / len(idx)
    return ((sst - ssw) / (a - 1)) / (ssw / (n - a))


def whole_sites():
    rng = np.random.default_rng(20261202)
    visits = [2, 3, 4, 2, 3, 5]
    site_of_row = [s for s, v in enumerate(visits) for _ in range(v)]
    n = len(site_of_row)
    site_level = rng.normal(0.0, 1.0, size=(6, 3))
    treat = np.array([0.9, 0.0, -0.4])
    roles = ["fenced", "fenced", "fenced", "open", "open", "open"]
    x = np.array([
        site_level[s] + (treat if roles[s] == "fenced" else 0.0) + rng.normal(0.0, 0.5, 3)
        for s in site_of_row
    ])
    d2 = squareform(pdist(x)) ** 2
    obs = pseudo_f(d2, [roles[s] for s in site_of_row])
    fs = []
    for fenced in itertools.combinations(range(6), 3):
        r = ["fenced" if s in fenced else "open" for s in range(6)]
        fs.append(pseudo_f(d2, [r[s] for s in site_of_row]))
    fs = np.array(fs)
    p = float(np.sum(fs >= obs * (1 - 1e-12)) / len(fs))
    return {
        "sites": site_of_row,
        "roles": roles,
        "x": x.tolist(),
        "observed_f": obs,
        "permuted_f_sorted": sorted(fs.tolist()),
        "arrangements": len(fs),
        "p_value": p,
    }


def binomial():
    # Rejections at alpha = 0.05 of a valid test in 100 simulated programs.
    return {
        "n": 100,
        "alpha": 0.05,
        "upper_0999": float(stats.binom.ppf(0.999, 100, 0.05)),
    }


def main():
    out = {
        "versions": VERSIONS,
        "platform": platform.platform(),
        "whole_sites": whole_sites(),
        "binomial": binomial(),
    }
    (OUT / "designs.json").write_text(json.dumps(out, indent=1, sort_keys=True) + "\n")


if __name__ == "__main__":
    main()
