"""One fit per group against a loop of plain per-group fits, in the same run.

    python -m benchmarks.by_group            # 2,000 groups of 200 rows x 5 features, one rule
    python -m benchmarks.by_group --quick    # 200 groups

Data: an invented seeded table, each group with its own coefficients. learnopt:
``task.fit_by("store")`` in one process and on every core. Peer: a loop that builds and solves
``lo.regression(group_rows, ...).require(rule)`` for each group (what a user would write
without fit_by). Reported: seconds, the ratio loop / fit_by (the target: at least 10), and the
certified count.
"""
from __future__ import annotations

import sys
import time

import numpy as np
import pandas as pd

import learnopt as lo

RULE = "x0 >= 0"
FEATURES = [f"x{i}" for i in range(5)]


def table(groups: int, rows: int = 200, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(groups * rows, 5))
    beta = rng.normal(size=(groups, 5))
    g = np.repeat(np.arange(groups), rows)
    y = np.einsum("ij,ij->i", X, beta[g]) + rng.normal(size=groups * rows)
    return pd.DataFrame(X, columns=FEATURES).assign(y=y, store=[f"s{k:05d}" for k in g])


def main(argv: list[str]) -> None:
    groups = 200 if "--quick" in argv else 2000
    frame = table(groups)
    task = lo.regression(frame, "y", features=FEATURES).require(RULE)
    t0 = time.perf_counter()
    certified = 0
    for _, part in frame.groupby("store"):
        certified += lo.regression(part, "y", features=FEATURES).require(RULE).solve().status == "optimal"
    loop = time.perf_counter() - t0
    print(f"loop of plain fits: {loop:.2f} s, {certified} of {groups} certified")
    for jobs in (1, -1):
        fits = task.fit_by("store", jobs=jobs, progress=False)
        print(f"fit_by jobs={jobs:>2}: {fits.seconds:.2f} s, {fits.certified} certified; "
              f"loop / fit_by = {loop / fits.seconds:.2f}")


if __name__ == "__main__":
    main(sys.argv[1:])
