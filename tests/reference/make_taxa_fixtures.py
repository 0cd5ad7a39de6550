"""Reference values for tally's per-taxon comparison of two groups of units
(analysis::taxa): pooled rates, their ratios, shares, and the split of the
difference into a shape part (Hellinger centroids) and a size part (pooled
rates). Computed from the definitions below written out in NumPy (no
community-ecology software). Writes tests/reference/taxa.json, recording the
library versions. Fixed seeds: rerunning with the same versions reproduces the
file.

Run from the repository root:  python3 tests/reference/make_taxa_fixtures.py

Notation: Y is a count matrix (units x taxa, non-negative integers), e_i > 0 the
effort of unit i; the units fall into two sets, "reference" and "group".
  pooled rate       R_G[j] = sum_{i in G} Y[i,j] / sum_{i in G} e_i
                    (every unit of G counts in the effort, empty ones too);
  ratio             R_group[j] / R_reference[j], null when R_reference[j] = 0;
  share             share_G[j] = R_G[j] / sum_k R_G[k];
  share change      100 (share_group[j] - share_reference[j]), percentage points;
  Hellinger         h_i[j] = sqrt(Y[i,j] / t_i), t_i = sum_j Y[i,j] > 0
                    (Legendre & Gallagher 2001, Oecologia 129:271-280); units
                    with t_i = 0 are skipped;
  centroid          c_G = mean of h_i over the units of G with t_i > 0;
  shape distance    d2 = sum_k (c_group[k] - c_reference[k])^2;
  shape contrib.    (c_group[j] - c_reference[j])^2 / d2  (sums to 1);
  size contrib.     (R_group[j] - R_reference[j])
                    / (sum_k R_group[k] - sum_k R_reference[k])  (sums to 1),
                    null for every taxon when the two totals are equal.
These definitions are the ones given for tally's taxa comparison; the only
published source is the Hellinger transformation itself.

Contents:
  cases  three cases, each with name, counts (rows = units), effort,
         reference_rows and group_rows (0-based row indices), taxa ("T0", ...),
         and per taxon (lists in taxon order) rate_reference, rate_group,
         ratio, share_reference, share_group, share_change_pp,
         shape_contribution, size_contribution; plus shape_distance_sq.
    effort_and_empty  9 reference + 7 group units, 12 taxa, seed 20260803
                      (seed 20260801 gave total rates within 0.3 % of each
                      other, hence size contributions up to 56 in size; the
                      script asserts the totals differ by at least 10 %).
                      Effort uniform on [0.5, 3.0]; counts Poisson with mean
                      effort x rate_j, rate_j = 20 * 0.7**j; in the group taxon
                      0 has rate x 0.4 and taxon 5 rate x 3. One reference unit
                      and one group unit are set to all zeros (they keep their
                      effort in the pooled rates and are skipped by the
                      centroids); taxon 11 is set to zero in every reference
                      unit, so its ratio is null. The rows of the two sets are
                      interleaved by a fixed permutation (same seed).
    plain_means       5 + 5 units, 6 taxa, effort 1 (rates are plain means),
                      seed 20260802; Poisson means uniform on [0.5, 8] per
                      taxon, drawn separately for each set; no empty unit.
                      Reference rows 0-4, group rows 5-9.
    equal_totals      hand-written 2 + 2 units x 3 taxa, effort 1: reference
                      [4,2,0], [2,2,2]; group [2,4,0], [4,0,2]. Both sets have
                      pooled rates [3, 2, 1] (equal totals, so the size
                      contributions are null; ratios 1, share changes 0), yet
                      their Hellinger centroids differ in taxon T1 only.

Sources:
  Legendre & Gallagher (2001), Oecologia 129:271-280  (Hellinger transformation)
"""
import json
import platform
from pathlib import Path

import numpy as np

OUT = Path(__file__).resolve().parent
VERSIONS = {
    "python": platform.python_version(),
    "numpy": np.__version__,
}


def compare(name, counts, effort, reference_rows, group_rows):
    Y = np.asarray(counts, dtype=np.int64)
    e = np.asarray(effort, dtype=float)
    assert Y.ndim == 2 and np.all(Y >= 0) and np.all(e > 0)
    assert sorted(reference_rows + group_rows) == list(range(Y.shape[0]))
    ntaxa = Y.shape[1]
    ref, grp = np.asarray(reference_rows), np.asarray(group_rows)

    # Pooled rates: summed counts over summed effort of the set.
    def rate(rows):
        return Y[rows].sum(axis=0).astype(float) / e[rows].sum()

    r_ref, r_grp = rate(ref), rate(grp)
    tot_ref, tot_grp = float(r_ref.sum()), float(r_grp.sum())
    assert tot_ref > 0 and tot_grp > 0

    ratio = [None if r_ref[j] == 0 else float(r_grp[j] / r_ref[j]) for j in range(ntaxa)]
    share_ref, share_grp = r_ref / tot_ref, r_grp / tot_grp
    share_change = 100.0 * (share_grp - share_ref)

    # Hellinger coordinates (Legendre & Gallagher 2001): sqrt of the row profile;
    # centroid = mean over the units of the set with a non-zero total.
    def centroid(rows):
        sub = Y[rows].astype(float)
        t = sub.sum(axis=1)
        h = np.sqrt(sub[t > 0] / t[t > 0, None])
        assert np.allclose(np.sum(h * h, axis=1), 1.0, rtol=0, atol=1e-12)
        return h.mean(axis=0)

    diff = centroid(grp) - centroid(ref)
    d2 = float(np.sum(diff * diff))
    assert d2 > 0
    shape = diff * diff / d2

    dtot = tot_grp - tot_ref
    if dtot == 0.0:
        size = [None] * ntaxa
    else:
        assert abs(dtot) > 1e-9 * max(tot_ref, tot_grp)
        size_arr = (r_grp - r_ref) / dtot
        assert abs(size_arr.sum() - 1.0) <= 1e-12, size_arr.sum()
        size = [float(v) for v in size_arr]
    assert abs(shape.sum() - 1.0) <= 1e-12, shape.sum()
    assert abs(share_change.sum()) <= 1e-12 * 100

    return {
        "name": name,
        "counts": [[int(v) for v in row] for row in Y],
        "effort": [float(v) for v in e],
        "reference_rows": [int(i) for i in ref],
        "group_rows": [int(i) for i in grp],
        "taxa": [f"T{j}" for j in range(ntaxa)],
        "rate_reference": [float(v) for v in r_ref],
        "rate_group": [float(v) for v in r_grp],
        "ratio": ratio,
        "share_reference": [float(v) for v in share_ref],
        "share_group": [float(v) for v in share_grp],
        "share_change_pp": [float(v) for v in share_change],
        "shape_contribution": [float(v) for v in shape],
        "size_contribution": size,
        "shape_distance_sq": d2,
    }


def effort_and_empty():
    rng = np.random.default_rng(20260803)
    n_ref, n_grp, ntaxa = 9, 7, 12
    base = 20.0 * 0.7 ** np.arange(ntaxa)
    changed = base.copy()
    changed[0] *= 0.4
    changed[5] *= 3.0
    n = n_ref + n_grp
    effort = rng.uniform(0.5, 3.0, size=n)
    is_group = np.array([False] * n_ref + [True] * n_grp)
    rates = np.where(is_group[:, None], changed[None, :], base[None, :])
    counts = rng.poisson(effort[:, None] * rates)
    ref_units = [i for i in range(n) if not is_group[i]]
    grp_units = [i for i in range(n) if is_group[i]]
    counts[ref_units[3], :] = 0   # an empty reference unit
    counts[grp_units[2], :] = 0   # an empty group unit
    counts[ref_units, 11] = 0     # taxon 11 absent from the reference
    # Interleave the two sets in a fixed order.
    perm = rng.permutation(n)
    counts, effort, is_group = counts[perm], effort[perm], is_group[perm]
    reference_rows = [i for i in range(n) if not is_group[i]]
    group_rows = [i for i in range(n) if is_group[i]]
    rec = compare("effort_and_empty", counts, effort, reference_rows, group_rows)
    # The case must show what it is meant to show.
    empties = [i for i in range(n) if counts[i].sum() == 0]
    assert len(empties) == 2 and any(is_group[i] for i in empties) and not all(is_group[i] for i in empties)
    assert [j for j, r in enumerate(rec["ratio"]) if r is None] == [11]
    assert rec["rate_group"][11] > 0
    # A well-conditioned size split: the total rates differ by at least 10 %.
    tot_ref, tot_grp = sum(rec["rate_reference"]), sum(rec["rate_group"])
    assert abs(tot_grp - tot_ref) >= 0.1 * tot_ref
    return rec


def plain_means():
    rng = np.random.default_rng(20260802)
    ntaxa = 6
    mean_ref = rng.uniform(0.5, 8.0, size=ntaxa)
    mean_grp = rng.uniform(0.5, 8.0, size=ntaxa)
    counts = np.vstack([rng.poisson(mean_ref, size=(5, ntaxa)),
                        rng.poisson(mean_grp, size=(5, ntaxa))])
    assert np.all(counts.sum(axis=1) > 0)
    return compare("plain_means", counts, [1.0] * 10, [0, 1, 2, 3, 4], [5, 6, 7, 8, 9])


def equal_totals():
    counts = [[4, 2, 0], [2, 2, 2], [2, 4, 0], [4, 0, 2]]
    rec = compare("equal_totals", counts, [1.0] * 4, [0, 1], [2, 3])
    assert rec["size_contribution"] == [None] * 3
    return rec


def main():
    cases = [effort_and_empty(), plain_means(), equal_totals()]
    payload = {"versions": VERSIONS, "cases": cases}
    (OUT / "taxa.json").write_text(json.dumps(payload, indent=1) + "\n")
    for c in cases:
        print(f"{c['name']}: {len(c['reference_rows'])} + {len(c['group_rows'])} units, "
              f"{len(c['taxa'])} taxa, shape_distance_sq={c['shape_distance_sq']:.12g}")


if __name__ == "__main__":
    main()
