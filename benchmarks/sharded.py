"""Sharded fits on a local dask cluster (2 single-threaded worker processes).

    python -m benchmarks.sharded              # squared loss at 1e5, 1e6, 1e7 rows; ADMM at 8e3 rows
    python -m benchmarks.sharded --quick      # 1e5 and 1e6 rows; ADMM at 2e3 rows
    python -m benchmarks.sharded --only growth|admm

Data: an invented seeded table (10 numeric features, a target) written as Parquet files of at
most 500 000 rows each into a temporary folder, generated file by file so the client never
holds more than one file's rows.

Reported:
- growth: seconds of the sharded squared-loss fit (lasso + one rule) per million rows as rows
  grow, and the slope of a least-squares line through (rows, seconds); the cluster is started
  before timing. Beside it, the in-memory fit of the same rows (while they fit in memory), as
  the peer in the same run.
- client memory: peak growth of the client process's resident memory during the fit (sampled
  every 10 ms with psutil), against the size of the table.
- ADMM: rounds, passes and seconds for logistic and hinge (l2 penalty) to reach a 1e-6
  relative gap, with the newton method's steps for logistic beside it.
"""
from __future__ import annotations

import os
import sys
import tempfile
import threading
import time

import numpy as np
import pandas as pd

import learnopt as lo

FILE_ROWS = 500_000
D = 10


def write_table(folder: str, rows: int, seed: int = 0, kind: str = "regression", file_rows: int = FILE_ROWS) -> str:
    rng = np.random.default_rng(seed)
    beta = np.linspace(2.0, -2.0, D)
    done, k = 0, 0
    while done < rows:
        m = min(file_rows, rows - done)
        X = rng.normal(size=(m, D))
        score = X @ beta + 0.5 + rng.normal(size=m)
        frame = pd.DataFrame(X, columns=[f"f{j}" for j in range(D)])
        frame["y"] = score if kind == "regression" else np.where(score > 0, 1.0, -1.0)
        frame.to_parquet(os.path.join(folder, f"part{k:04d}.parquet"), index=False)
        done, k = done + m, k + 1
    return os.path.join(folder, "*.parquet")


class PeakMemory:
    """Peak resident memory growth of this process while the block runs (psutil, 10 ms)."""

    def __enter__(self):
        import psutil
        self.proc = psutil.Process()
        self.base = self.peak = self.proc.memory_info().rss
        self.running = True
        self.thread = threading.Thread(target=self._watch, daemon=True)
        self.thread.start()
        return self

    def _watch(self):
        while self.running:
            self.peak = max(self.peak, self.proc.memory_info().rss)
            time.sleep(0.01)

    def __exit__(self, *exc):
        self.running = False
        self.thread.join()
        self.growth_mib = (self.peak - self.base) / 2**20


def growth(client, sizes) -> list[dict]:
    rows_out = []
    for n in sizes:
        with tempfile.TemporaryDirectory() as folder:
            pattern = write_table(folder, n)
            task = lo.regression(pattern, target="y").penalize(lo.penalty.l1(0.01)).require("f0 >= 1.9")
            with PeakMemory() as mem:
                t0 = time.perf_counter()
                fit = task.solve(client=client, progress=False)
                seconds = time.perf_counter() - t0
            row = {"rows": n, "partitions": fit.extras["partitions"], "status": fit.status,
                   "rel_gap": fit.rel_gap, "seconds": seconds, "s_per_million": seconds / n * 1e6,
                   "data_s": fit.extras["data_seconds"], "passes": fit.extras["passes"],
                   "client_peak_mib": mem.growth_mib, "table_mib": n * (D + 1) * 8 / 2**20}
            if n <= 1_000_000:        # the peer: the same rows in memory (compressed route)
                frame = pd.read_parquet(folder)
                t0 = time.perf_counter()
                ref = lo.regression(frame, target="y").penalize(lo.penalty.l1(0.01)).require("f0 >= 1.9").solve()
                row["in_memory_s"] = time.perf_counter() - t0
                row["rel_diff"] = abs(fit.objective - ref.objective) / max(1.0, abs(ref.objective))
                del frame
            rows_out.append(row)
            print(pd.DataFrame([row]).to_string(index=False, float_format=lambda v: f"{v:.4g}"), flush=True)
    return rows_out


def admm_rounds(client, n: int) -> list[dict]:
    from learnopt.solve.routes import sharded
    from learnopt.scale.cluster import ClusterSettings
    from learnopt.solve.loop import solve_task
    from learnopt.solve.routes.base import Settings
    out = []
    with tempfile.TemporaryDirectory() as folder:
        pattern = write_table(folder, n, seed=1, kind="classification", file_rows=n // 4)
        for loss, method in [("logistic", "newton"), ("logistic", "admm"), ("hinge", "admm")]:
            task = lo.classification(pattern, target="y", loss=loss).penalize(lo.penalty.l2(1e-3))
            t0 = time.perf_counter()
            runner = sharded.Runner(task, cluster=ClusterSettings(client=client, progress=True, method=method))
            fit = solve_task(task, Settings(gap_tol=1e-6), runner=runner)
            row = {"loss": loss, "method": method, "rows": n, "status": fit.status, "rel_gap": fit.rel_gap,
                   "rounds": fit.extras["rounds"], "passes": fit.extras["passes"],
                   "seconds": time.perf_counter() - t0}
            out.append(row)
            print(pd.DataFrame([row]).to_string(index=False, float_format=lambda v: f"{v:.4g}"), flush=True)
    return out


def main(argv=None) -> int:
    import distributed
    args = argv if argv is not None else sys.argv[1:]
    quick = "--quick" in args
    only = args[args.index("--only") + 1] if "--only" in args else None
    sizes = [100_000, 1_000_000] + ([] if quick else [10_000_000])
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                       dashboard_address=":0", silence_logs=50)
    client = distributed.Client(cluster, set_as_default=False)
    try:
        if only in (None, "growth"):
            print("growth of the sharded squared-loss fit (lasso + one rule)")
            rows = growth(client, sizes)
            n = np.array([r["rows"] for r in rows], float)
            s = np.array([r["seconds"] for r in rows])
            slope, intercept = np.polyfit(n / 1e6, s, 1)
            print(f"slope {slope:.3f} s per million rows, intercept {intercept:.3f} s")
        if only in (None, "admm"):
            print("\nADMM rounds to a 1e-6 relative gap (4 partitions)")
            admm_rounds(client, 2_000 if quick else 8_000)
    finally:
        client.close()
        cluster.close()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
