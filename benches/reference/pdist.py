#!/usr/bin/env python3
"""Reference timing for benches/distances.rs: SciPy pdist on n = 5000 samples x
200 taxa of sparse random counts (about 70 % zeros), best of 3, wall and CPU
seconds printed (CPU time is the fair figure on a machine shared with other jobs).

    python3 benches/reference/pdist.py

Target and last figures: benches/README.md, "Dissimilarity matrix".
"""
import platform
import time

import numpy as np
import scipy
from scipy.spatial.distance import pdist

N, P = 5000, 200


def main():
    rng = np.random.default_rng(5000200)
    y = np.where(rng.random((N, P)) < 0.7, 0.0, rng.integers(1, 51, size=(N, P)).astype(float))
    y[np.arange(N), np.arange(N) % P] += 1.0
    print(f"python {platform.python_version()}, numpy {np.__version__}, scipy {scipy.__version__}")
    print(f"pdist: n = {N} samples x {P} taxa, {N * (N - 1) // 2} pairs (single-threaded)")
    for metric in ("braycurtis", "euclidean", "cityblock", "jaccard"):
        best = best_cpu = float("inf")
        for _ in range(3):
            c = time.process_time()
            t = time.perf_counter()
            d = pdist(y, metric)
            best = min(best, time.perf_counter() - t)
            best_cpu = min(best_cpu, time.process_time() - c)
        print(f"{metric:<12} {best:8.3f} s wall {best_cpu:8.3f} s cpu   (sum of entries {d.sum():.6e})")


if __name__ == "__main__":
    main()
