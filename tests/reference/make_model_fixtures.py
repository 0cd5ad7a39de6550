"""Reference values for tally's linear-model, PERMANOVA, dispersion and p-value
adjustment kernels, computed with general-purpose libraries only (NumPy, SciPy,
statsmodels). Writes tests/reference/models_*.json; each file records the library
versions. Fixed seeds: rerunning reproduces the files.

Run from the repository root:  python3 tests/reference/make_model_fixtures.py
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
from statsmodels.stats.multitest import multipletests

OUT = Path(__file__).resolve().parent
VERSIONS = {
    "python": platform.python_version(),
    "numpy": np.__version__,
    "scipy": scipy.__version__,
    "statsmodels": statsmodels.__version__,
    "pandas": pd.__version__,
}


def write(name, payload):
    payload = {"generator": "tests/reference/make_model_fixtures.py", "versions": VERSIONS, **payload}
    (OUT / name).write_text(json.dumps(payload, indent=1) + "\n")


def oneway():
    """scipy.stats.f_oneway on random one-variable groups (and the mussel data of its docs)."""
    rng = np.random.default_rng(101)
    cases = []
    for sizes, shift in [([5, 7, 6], 0.8), ([10, 10, 10, 10], 0.3), ([3, 8], 1.5), ([4, 4, 9, 2, 6], 0.0)]:
        groups = [list(rng.normal(loc=shift * g, scale=1.0, size=s)) for g, s in enumerate(sizes)]
        res = stats.f_oneway(*groups)
        cases.append({"groups": groups, "f": float(res.statistic), "p_f_dist": float(res.pvalue)})
    mussel = [[0.0571, 0.0813, 0.0831, 0.0976, 0.0817, 0.0859, 0.0735, 0.0659, 0.0923, 0.0836],
              [0.0873, 0.0662, 0.0672, 0.0819, 0.0749, 0.0649, 0.0835, 0.0725],
              [0.0974, 0.1352, 0.0817, 0.1016, 0.0968, 0.1064, 0.105],
              [0.1033, 0.0915, 0.0781, 0.0685, 0.0677, 0.0697, 0.0764, 0.0689],
              [0.0703, 0.1026, 0.0956, 0.0973, 0.1039, 0.1045]]
    res = stats.f_oneway(*mussel)
    cases.append({"groups": mussel, "f": float(res.statistic), "p_f_dist": float(res.pvalue)})
    write("models_oneway.json", {"what": "scipy.stats.f_oneway F of one-variable groups", "cases": cases})


def ols():
    """Pooled multivariate OLS R^2 of a centred Y on [1, x, factor] (statsmodels OLS per column)."""
    rng = np.random.default_rng(202)
    n, p = 18, 4
    x = rng.normal(size=n)
    f = np.array(list("abc") * 6)
    rng.shuffle(f)
    y = rng.normal(size=(n, p)) + np.outer(x, [0.5, -0.2, 0.0, 0.3]) + (f == "b")[:, None] * [0.4, 0.0, 0.6, -0.3]
    df = pd.DataFrame({"x": x, "f": f})
    ess = tss = 0.0
    for j in range(p):
        df["y"] = y[:, j]
        fit = smf.ols("y ~ x + C(f)", df).fit()
        ess += fit.ess
        tss += fit.centered_tss
    m = 3  # x + two treatment columns
    r2 = ess / tss
    r2_adj = 1 - (1 - r2) * (n - 1) / (n - m - 1)
    f_stat = (r2 / m) / ((1 - r2) / (n - m - 1))
    write("models_ols.json", {
        "what": "pooled OLS R^2 = sum ESS / sum centred TSS over columns of Y (statsmodels OLS y ~ x + C(f))",
        "y": y.tolist(), "x": x.tolist(), "factor": f.tolist(), "m": m,
        "r2": r2, "r2_adj": r2_adj, "f": f_stat,
    })


def anova():
    """Type I and II sums of squares (statsmodels anova_lm) on an unbalanced 3 x 2 design
    (docs/methods.md, "Distance-based linear models")."""
    rng = np.random.default_rng(3)
    a = np.array(list("aaaaabbbbbbbccc"))
    b = np.array(list("xyxyxxyyxyxyyxy"))
    y = rng.normal(size=len(a)) + (a == "b") * 1.0 + (b == "y") * 0.5
    df = pd.DataFrame(dict(y=y, A=a, B=b))
    t1 = anova_lm(smf.ols("y ~ C(A) * C(B)", df).fit(), typ=1)
    t2i = anova_lm(smf.ols("y ~ C(A) * C(B)", df).fit(), typ=2)
    t2 = anova_lm(smf.ols("y ~ C(A) + C(B)", df).fit(), typ=2)
    write("models_anova.json", {
        "what": "statsmodels anova_lm sums of squares; typ=1 on y ~ C(A)*C(B); typ=2 on y ~ C(A)+C(B) "
                "(each main effect after the other) and the interaction row of typ=2 on y ~ C(A)*C(B)",
        "y": y.tolist(), "A": a.tolist(), "B": b.tolist(),
        "type1": {"ss": t1["sum_sq"].values[:3].tolist(), "df": t1["df"].values[:3].tolist(),
                  "resid_ss": float(t1["sum_sq"].values[3]), "resid_df": float(t1["df"].values[3]),
                  "f": t1["F"].values[:3].tolist()},
        "type2_main": {"ss": t2["sum_sq"].values[:2].tolist(), "resid_ss": float(t2["sum_sq"].values[2]),
                       "resid_df": float(t2["df"].values[2]), "f": t2["F"].values[:2].tolist()},
        "type2_interaction_ss": float(t2i["sum_sq"].values[2]),
    })


def multitest():
    """statsmodels multipletests holm and fdr_bh adjusted p-values."""
    rng = np.random.default_rng(404)
    vectors = [[0.01, 0.04, 0.03, 0.20], [0.5], [0.001, 0.001, 0.2, 0.04, 0.04, 0.9, 0.03],
               list(rng.uniform(0, 0.2, size=10)), list(rng.uniform(0, 1, size=15))]
    cases = []
    for p in vectors:
        cases.append({"p": [float(v) for v in p],
                      "holm": multipletests(p, method="holm")[1].tolist(),
                      "bh": multipletests(p, method="fdr_bh")[1].tolist()})
    write("models_multitest.json", {"what": "statsmodels.stats.multitest.multipletests", "cases": cases})


def dispersion():
    """Distances to group centroids from coordinates (NumPy) and their f_oneway F."""
    rng = np.random.default_rng(505)
    sizes = [4, 6, 5]
    x = np.vstack([rng.normal(scale=1.0 + 0.5 * g, size=(s, 3)) + g for g, s in enumerate(sizes)])
    g = np.repeat(np.arange(3), sizes)
    z = np.zeros(len(g))
    for k in range(3):
        idx = g == k
        z[idx] = np.linalg.norm(x[idx] - x[idx].mean(axis=0), axis=1)
    res = stats.f_oneway(*[z[g == k] for k in range(3)])
    write("models_dispersion.json", {
        "what": "Euclidean distances of points to their group centroid (NumPy) and scipy.stats.f_oneway on them",
        "coordinates": x.tolist(), "groups": g.tolist(), "z": z.tolist(), "f": float(res.statistic),
    })


if __name__ == "__main__":
    oneway()
    ols()
    anova()
    multitest()
    dispersion()
