#!/usr/bin/env python3
"""Write the reference fixtures under tests/reference/ that `cargo test` reads.

Uses NumPy and SciPy only (no ecology software). Every file written records the
Python, NumPy and SciPy versions; every random draw uses a fixed seed, so
rerunning with the same versions reproduces the files byte for byte.

    python3 tests/reference/make_fixtures.py          # writes every fixture
    python3 tests/reference/make_fixtures.py --check  # exit 1 if a file would change

Fixtures written here:
  distances.json  dissimilarities of random count matrices under each transform,
                  and PCoA eigenvalues of their Gower-centred matrices.
"""

import json
import platform
import sys
from pathlib import Path

import numpy as np
import scipy
from scipy.spatial.distance import pdist

HERE = Path(__file__).resolve().parent


def versions():
    return {
        "python": platform.python_version(),
        "numpy": np.__version__,
        "scipy": scipy.__version__,
    }


# --------------------------------------------------------------------------
# Inputs
# --------------------------------------------------------------------------

def matrices():
    """Random count matrices with the zero patterns the kernels must handle."""
    out = []

    # Sparse overdispersed counts (Poisson with gamma-distributed means), then
    # forced edge cases: an all-zero column, a row with a single non-zero entry,
    # a row that is mostly zeros.
    rng = np.random.default_rng(20260501)
    y = rng.poisson(rng.gamma(0.6, 6.0, size=(12, 8))).astype(float)
    y[:, 3] = 0.0
    y[2, :] = 0.0
    y[2, 5] = 7.0
    y[7, :] = 0.0
    y[7, 0] = 1.0
    y[7, 6] = 2.0
    for i in range(y.shape[0]):          # every other row keeps at least one organism
        if y[i].sum() == 0:
            y[i, 0] = 1.0
    out.append(("sparse-12x8", y, "Poisson-gamma counts, seed 20260501; column 3 all zero, "
                "row 2 one non-zero, row 7 two non-zeros"))

    # Denser counts with no empty column (chi-square is defined here).
    rng = np.random.default_rng(20260502)
    y = rng.poisson(rng.gamma(2.0, 4.0, size=(15, 10))).astype(float)
    y[4, :] = 0.0
    y[4, 9] = 3.0
    for j in range(y.shape[1]):
        if y[:, j].sum() == 0:
            y[0, j] = 1.0
    for i in range(y.shape[0]):
        if y[i].sum() == 0:
            y[i, 1] = 1.0
    out.append(("dense-15x10", y, "Poisson-gamma counts, seed 20260502; row 4 one non-zero, "
                "no empty row or column"))

    # Two all-zero samples: the empty-sample conventions and refusals.
    rng = np.random.default_rng(20260503)
    y = rng.poisson(3.0, size=(7, 5)).astype(float)
    y[1, :] = 0.0
    y[5, :] = 0.0
    for j in range(y.shape[1]):
        if y[:, j].sum() == 0:
            y[0, j] = 1.0
    out.append(("empty-rows-7x5", y, "Poisson(3) counts, seed 20260503; rows 1 and 5 all zero"))
    return out


# --------------------------------------------------------------------------
# Transforms (docs/methods.md, "Transformations"), written out in NumPy
# --------------------------------------------------------------------------

class Refused(Exception):
    """An input the method refuses, with the error tally must raise."""

    def __init__(self, kind, **where):
        super().__init__(kind)
        self.payload = {"kind": kind, **where}


def empty_rows(y):
    return [int(i) for i in np.flatnonzero(y.sum(axis=1) <= 0)]


def empty_cols(y):
    return [int(j) for j in np.flatnonzero(y.sum(axis=0) <= 0)]


def profiles(y):
    rows = empty_rows(y)
    if rows:
        raise Refused("EmptySamples", rows=rows)
    return y / y.sum(axis=1, keepdims=True)


TRANSFORMS = {
    "none": lambda y: y.copy(),
    "sqrt": np.sqrt,
    "fourth-root": lambda y: y ** 0.25,
    "log1p": np.log1p,
    "presence": lambda y: (y > 0).astype(float),
    "profile": profiles,
    "hellinger": lambda y: np.sqrt(profiles(y)),
}


# --------------------------------------------------------------------------
# Distances. SciPy pdist where SciPy has the coefficient; NumPy formulas where
# no general library has it (chi-square, Hellinger, quantitative Kulczynski:
# SciPy 1.17 has none of them; definitions in docs/methods.md, "Dissimilarities").
# --------------------------------------------------------------------------

def condensed(square):
    n = square.shape[0]
    return [float(square[i, k]) for i in range(n) for k in range(i + 1, n)]


def bray_curtis(x):
    rows = empty_rows(x)
    if len(rows) >= 2:      # pdist returns NaN for two empty samples; tally refuses
        raise Refused("EmptySamples", rows=rows)
    return [float(v) for v in pdist(x, "braycurtis")]


def chi_square(x):
    # d^2(i,k) = sum_j (a_ij - a_kj)^2 / c_j, a = row profiles, c = column masses
    # of the matrix given (docs/methods.md, "Dissimilarities").
    a = profiles(x)
    cols = empty_cols(x)
    if cols:
        raise Refused("EmptyTaxa", cols=cols)
    c = x.sum(axis=0) / x.sum()
    diff = a[:, None, :] - a[None, :, :]
    return condensed(np.sqrt((diff ** 2 / c).sum(axis=2)))


def hellinger(x):
    # d(i,k) = sqrt(sum_j (sqrt(a_ij) - sqrt(a_kj))^2), range [0, sqrt 2].
    h = np.sqrt(profiles(x))
    diff = h[:, None, :] - h[None, :, :]
    return condensed(np.sqrt((diff ** 2).sum(axis=2)))


def kulczynski(x):
    # d(i,k) = 1 - (W/A + W/B)/2, W = sum_j min(x_ij, x_kj), A, B row totals.
    rows = empty_rows(x)
    if rows:
        raise Refused("EmptySamples", rows=rows)
    t = x.sum(axis=1)
    w = np.minimum(x[:, None, :], x[None, :, :]).sum(axis=2)
    return condensed(1.0 - 0.5 * (w / t[:, None] + w / t[None, :]))


DISTANCES = {
    "bray-curtis": ("scipy.spatial.distance.pdist(x, 'braycurtis')", bray_curtis),
    "euclidean": ("scipy.spatial.distance.pdist(x, 'euclidean')",
                  lambda x: [float(v) for v in pdist(x, "euclidean")]),
    "manhattan": ("scipy.spatial.distance.pdist(x, 'cityblock')",
                  lambda x: [float(v) for v in pdist(x, "cityblock")]),
    # SciPy's jaccard counts any non-zero entry as present; inputs here are >= 0,
    # so that is presence = value > 0. Two empty samples give 0 (SciPy >= 1.2).
    "jaccard": ("scipy.spatial.distance.pdist(x, 'jaccard')",
                lambda x: [float(v) for v in pdist(x, "jaccard")]),
    "chi-square": ("numpy formula (no library oracle)", chi_square),
    "hellinger": ("numpy formula (no library oracle)", hellinger),
    "kulczynski": ("numpy formula (no library oracle)", kulczynski),
}


def gower_eigenvalues(d_condensed, n):
    """Eigenvalues (descending) of G = J A J, A = -D^2/2, formed by matrix
    products (independent of tally's O(n^2) route), by numpy.linalg.eigh."""
    d = np.zeros((n, n))
    iu = np.triu_indices(n, 1)
    d[iu] = d_condensed
    d = d + d.T
    j = np.eye(n) - np.ones((n, n)) / n
    g = j @ (-0.5 * d ** 2) @ j
    ev = np.linalg.eigh(g)[0][::-1]
    return [float(v) for v in ev], float(np.trace(g))


def distances_fixture():
    mats = matrices()
    cases = []
    pcoa = []
    for name, y, _ in mats:
        for tname, tf in TRANSFORMS.items():
            try:
                x = tf(y)
                terr = None
            except Refused as e:
                terr = e.payload
            for dname, (oracle, df) in DISTANCES.items():
                case = {"matrix": name, "transform": tname, "distance": dname, "oracle": oracle}
                if terr is not None:
                    case["error"] = terr
                    case["oracle"] = ('docs/methods.md, "Empty samples and empty taxa": '
                                      "refused (transform needs totals)")
                else:
                    try:
                        case["condensed"] = df(x)
                    except Refused as e:
                        case["error"] = e.payload
                        case["oracle"] = 'docs/methods.md, "Empty samples and empty taxa": refused'
                cases.append(case)
                if "condensed" in case and tname in ("none", "sqrt"):
                    ev, tr = gower_eigenvalues(np.array(case["condensed"]), y.shape[0])
                    pcoa.append({"matrix": name, "transform": tname, "distance": dname,
                                 "oracle": "numpy.linalg.eigh of J(-D^2/2)J",
                                 "eigenvalues": ev, "trace": tr})
    return {
        "about": "Dissimilarities (condensed, scipy pdist order) of count matrices after each "
                 "transform, with the error tally must raise where a method is undefined; "
                 "PCoA eigenvalues (descending) of the Gower-centred matrices.",
        "generator": "tests/reference/make_fixtures.py",
        "versions": versions(),
        "matrices": [{"name": n, "note": note, "values": y.tolist()} for n, y, note in mats],
        "cases": cases,
        "pcoa": pcoa,
    }


FIXTURES = {
    "distances.json": distances_fixture,
}


def main():
    check = "--check" in sys.argv[1:]
    changed = []
    for fname, make in FIXTURES.items():
        text = json.dumps(make(), indent=1) + "\n"
        path = HERE / fname
        if check:
            if not path.exists() or path.read_text() != text:
                changed.append(fname)
        else:
            path.write_text(text)
            print(f"wrote {path.relative_to(HERE.parent.parent)}")
    if changed:
        print("would change: " + ", ".join(changed))
        sys.exit(1)


if __name__ == "__main__":
    main()
