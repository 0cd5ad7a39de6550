"""NumPy reference for benches/permanova.rs: one-way PERMANOVA, n = 2000 samples in
4 groups, 200 taxa of random counts, Bray-Curtis, 9999 permutations.

Written as a NumPy user would write it for speed: D^2 is computed once, permutations
are processed in batches, and SS_W for a whole batch comes from one matrix product
M = D2 @ E, where E stacks the one-hot group indicator matrices of the batch
(docs/methods.md, "Computing many permutations"):
SS_W(pi) = sum_g (E_pi[:, g] . M_pi[:, g]) / (2 n_g).
Prints wall and CPU seconds. Run: python3 benches/reference/permanova.py
Target and last figures: benches/README.md, "PERMANOVA".
"""
import time

import numpy as np
from scipy.spatial.distance import pdist, squareform

N, P, A, PERMS, BATCH = 2000, 200, 4, 9999, 64


def main():
    rng = np.random.default_rng(2024)
    y = np.where(rng.random((N, P)) < 0.6, 0.0, rng.integers(1, 31, size=(N, P))).astype(float)
    t0 = time.perf_counter()
    d2 = squareform(pdist(y, "braycurtis")) ** 2
    t_bc = time.perf_counter() - t0
    labels = np.arange(N) % A
    sizes = np.bincount(labels)

    t1, c1 = time.perf_counter(), time.process_time()
    sst = d2.sum() / (2 * N)

    def ss_within(lab_batch):
        # lab_batch: (b, N) permuted labels -> (b,) SS_W
        b = lab_batch.shape[0]
        e = np.zeros((N, b * A))
        cols = (np.arange(b)[:, None] * A + lab_batch).T  # (N, b)
        np.put_along_axis(e, cols, 1.0, axis=1)
        m = d2 @ e
        per = (e * m).sum(axis=0).reshape(b, A)
        return (per / (2 * sizes)).sum(axis=1)

    def f_of(ssw):
        return ((sst - ssw) / (A - 1)) / (ssw / (N - A))

    f_obs = f_of(ss_within(labels[None, :]))[0]
    count = 0
    prng = np.random.default_rng(1)
    done = 0
    while done < PERMS:
        b = min(BATCH, PERMS - done)
        lab = np.array([labels[prng.permutation(N)] for _ in range(b)])
        count += int((f_of(ss_within(lab)) >= f_obs * (1 - 1e-9)).sum())
        done += b
    t_perm, c_perm = time.perf_counter() - t1, time.process_time() - c1
    print(f"numpy {np.__version__} scipy-pdist bray-curtis: {t_bc:.3f} s")
    print(f"numpy permanova n={N} groups={A} permutations={PERMS}: {t_perm:.3f} s wall, "
          f"{c_perm:.3f} s cpu (F = {f_obs:.6f}, p = {(count + 1) / (PERMS + 1):.4f})")


if __name__ == "__main__":
    main()
