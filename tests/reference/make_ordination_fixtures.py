"""Reference values for tally's correspondence analysis, CCA, confidence ellipses
and box-plot quartiles (numpy.percentile, linear method).

Writes tests/reference/ordination.json. Uses only numpy and scipy (general-purpose
libraries); run from the repository root:

    python3 tests/reference/make_ordination_fixtures.py

Rerunning reproduces the file byte for byte (fixed seed, fixed formatting).
"""

import json
import platform

import numpy as np
import scipy
from scipy import stats

# Toy community of docs/methods.md, "The toy community": 10 samples x 6 taxa.
TOY = np.array(
    [
        [12, 5, 0, 3, 1, 0],
        [20, 8, 1, 5, 0, 2],
        [9, 4, 0, 1, 2, 0],
        [15, 6, 2, 4, 1, 1],
        [30, 12, 1, 7, 3, 0],
        [3, 2, 8, 1, 9, 4],
        [1, 4, 12, 0, 6, 7],
        [5, 1, 6, 2, 11, 3],
        [2, 3, 15, 1, 8, 9],
        [0, 2, 5, 0, 4, 2],
    ],
    dtype=float,
)


SMALL = np.array([[10, 2, 1], [8, 4, 2], [3, 6, 5], [1, 7, 9]], dtype=float)


def residuals(y):
    p = y / y.sum()
    r, c = p.sum(1), p.sum(0)
    s = (p - np.outer(r, c)) / np.sqrt(np.outer(r, c))
    return p, r, c, s


def ca_inertias(y):
    _, _, _, s = residuals(y)
    sv = np.linalg.svd(s, compute_uv=False)
    return sv ** 2


def cca_constrained(y, z):
    """Constrained inertia and canonical eigenvalues by weighted least squares (numpy lstsq)."""
    _, r, _, s = residuals(y)
    zc = z - r @ z
    zw = np.sqrt(r)[:, None] * zc
    coef, *_ = np.linalg.lstsq(zw, s, rcond=None)
    fit = zw @ coef
    sv = np.linalg.svd(fit, compute_uv=False)
    usv = np.linalg.svd(s - fit, compute_uv=False)
    return float((fit ** 2).sum()), sv ** 2, float(((s - fit) ** 2).sum()), usv ** 2


def chi2_total_inertia(y):
    chi2 = stats.chi2_contingency(y, correction=False)[0]
    return float(chi2), float(chi2 / y.sum())


def table_entry(y, z):
    chi2, total = chi2_total_inertia(y)
    con, eig, unc, ueig = cca_constrained(y, z)
    ev = ca_inertias(y)
    return {
        "y": y.tolist(),
        "z": z.tolist(),
        "chi_square": chi2,
        "total_inertia_chi2_contingency": total,
        "ca_inertias_numpy_svd": [float(v) for v in ev if v > 1e-10 * ev[0]],
        "cca_constrained_inertia": con,
        "cca_unconstrained_inertia": unc,
        "cca_eigenvalues": [float(v) for v in eig if v > 1e-10 * eig[0]],
        "cca_unconstrained_eigenvalues": [float(v) for v in ueig if v > 1e-10 * ueig[0]],
    }


def ca_taxa(y, k=2):
    """CA column standard coordinates (numpy SVD of the standardised residuals)
    on the first k axes, and each column's share of the inertia of those axes."""
    _, _, c, s = residuals(y)
    u, sv, vt = np.linalg.svd(s, full_matrices=False)
    std = vt.T[:, :k] / np.sqrt(c)[:, None]
    principal = std * sv[:k]
    part = c * (principal ** 2).sum(1)
    return std, part / part.sum()


def cca_taxa(y, z, k=2):
    """CCA species standard scores: right singular vectors of the fitted part
    (numpy lstsq, then SVD), divided by sqrt(column masses)."""
    _, r, c, s = residuals(y)
    zc = z - r @ z
    zw = np.sqrt(r)[:, None] * zc
    coef, *_ = np.linalg.lstsq(zw, s, rcond=None)
    fit = zw @ coef
    u, sv, vt = np.linalg.svd(fit, full_matrices=False)
    k = min(k, int((sv > 1e-10 * sv[0]).sum()))
    std = vt.T[:, :k] / np.sqrt(c)[:, None]
    principal = std * sv[:k]
    part = c * (principal ** 2).sum(1)
    return std, part / part.sum()


def pcoa_wa(y, k=2):
    """PCoA of Bray-Curtis (scipy pdist) by numpy eigh of the Gower-centred
    matrix, and each taxon at the weighted average of the sample coordinates."""
    from scipy.spatial.distance import pdist, squareform

    d = squareform(pdist(y, "braycurtis"))
    n = len(y)
    j = np.eye(n) - 1.0 / n
    g = -0.5 * j @ (d ** 2) @ j
    val, vec = np.linalg.eigh(g)
    order = np.argsort(val)[::-1][:k]
    x = vec[:, order] * np.sqrt(val[order])
    wa = (y.T @ x) / y.sum(0)[:, None]
    w = y.sum(0) / y.sum()
    part = w * (wa ** 2).sum(1)
    return x, wa, part / part.sum()


def taxa_entry(y, z):
    ca_std, ca_share = ca_taxa(y)
    cca_std, cca_share = cca_taxa(y, z)
    x, wa, wa_share = pcoa_wa(y)
    return {
        "ca_col_standard_2": ca_std.tolist(),
        "ca_col_share_2": ca_share.tolist(),
        "cca_species_standard": cca_std.tolist(),
        "cca_species_share": cca_share.tolist(),
        "pcoa_bray_curtis_coords_2": x.tolist(),
        "pcoa_weighted_averages_2": wa.tolist(),
        "pcoa_weighted_average_share_2": wa_share.tolist(),
    }


def main():
    rng = np.random.default_rng(20240607)
    toy_z = np.log(TOY.sum(1))[:, None]
    rand_y = rng.poisson(rng.uniform(0.5, 12.0, size=(12, 7))).astype(float) + 1.0
    rand_z = np.column_stack(
        [rng.normal(size=12), (np.arange(12) % 3 == 0).astype(float), (np.arange(12) % 3 == 1).astype(float)]
    )
    f_quantiles = []
    for level in (0.9, 0.95, 0.99):
        for df2 in (1, 2, 3, 5, 8, 20, 100):
            f_quantiles.append({"level": level, "df1": 2, "df2": df2, "ppf": float(stats.f.ppf(level, 2, df2))})
    box_values = [float(v) for v in rng.lognormal(3.0, 1.0, size=13).round(2)] + [0.0, 250.0]
    box = {
        "values": box_values,
        "numpy_percentile_25_50_75": [float(v) for v in np.percentile(box_values, [25, 50, 75])],
    }
    out = {
        "box_quartiles": box,
        "generator": "tests/reference/make_ordination_fixtures.py",
        "versions": {"python": platform.python_version(), "numpy": np.__version__, "scipy": scipy.__version__},
        "toy": table_entry(TOY, toy_z),
        "random": table_entry(rand_y, rand_z),
        # A 4 x 3 table whose rank-deficient CCA residual once exposed an inaccurate SVD.
        "small": table_entry(SMALL, np.arange(1.0, 5.0)[:, None]),
        "f_quantiles": f_quantiles,
        # Taxon scores of the toy community: CA, CCA on log totals, PCoA of Bray-Curtis.
        "toy_taxa": taxa_entry(TOY, toy_z),
    }
    with open("tests/reference/ordination.json", "w") as fh:
        json.dump(out, fh, indent=1, sort_keys=True)
        fh.write("\n")


if __name__ == "__main__":
    main()
