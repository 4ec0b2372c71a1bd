"""Sparse input without densifying: time and peak memory of a lasso with one rule.

    python -m benchmarks.sparse 100000 10000 0.001        # rows, columns, density

The design is built as CSR from random (row, column) pairs (seeded), so making it never
allocates rows x columns. Peak memory is the growth of the process's maximum resident size
during the fit (``resource.getrusage``), to compare with the size of the dense matrix.
"""
from __future__ import annotations

import resource
import sys
import time

import numpy as np
import scipy.sparse as sp

import learnopt as lo


def main(argv=None) -> int:
    args = (argv if argv is not None else sys.argv[1:]) or ["100000", "10000", "0.001"]
    n, d, density = int(args[0]), int(args[1]), float(args[2])
    rng = np.random.default_rng(0)
    nnz = int(n * d * density)
    X = sp.csr_matrix((rng.standard_normal(nnz), (rng.integers(0, n, nnz), rng.integers(0, d, nnz))), shape=(n, d))
    X.sum_duplicates()
    beta = np.zeros(d)
    beta[:20] = rng.normal(size=20) * 3
    y = X @ beta + rng.normal(size=n)
    base = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    t0 = time.perf_counter()
    fit = lo.regression(X, y).penalize(lo.penalty.l1(0.01)).require("x0 >= 0").solve()
    seconds = time.perf_counter() - t0
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    print(f"rows {n}, columns {d}, nonzeros {X.nnz}: route {fit.route}, solver {fit.solver}, status {fit.status}, "
          f"relative gap {fit.rel_gap:.2g}, {seconds:.1f} s, peak memory +{(peak - base) / 1024:.0f} MiB "
          f"(the dense matrix alone would be {n * d * 8 / 2**20:.0f} MiB)")
    return 0 if fit.status == "optimal" else 1


if __name__ == "__main__":
    raise SystemExit(main())
