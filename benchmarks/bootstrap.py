"""Bootstrap refits on the bundled demo task, against one fit of the same task in the same run.

    python -m benchmarks.bootstrap            # 200 refits, one process and every core
    python -m benchmarks.bootstrap --quick    # 50 refits

The task is the one ``learnopt demo`` solves (recipes/deliveries.toml: huber loss, an l1
penalty, five rules, 480 training rows). Reported: the median of 5 solves of the task, then the
refits' wall time in one process (``jobs=1``) and on every core (``jobs=-1``), each as a ratio
to one fit (the target in issue 22: 200 refits under 20 fits), the certified count, and the
average seconds per refit with where it goes (the refit's own timings: build, compile, solve,
certify).
"""
from __future__ import annotations

import os
import statistics
import sys
import time

from learnopt.interface.jobs import training_task
from learnopt.interface.recipes import read_recipe

HERE = os.path.dirname(os.path.abspath(__file__))


def main(argv: list[str]) -> None:
    refits = 50 if "--quick" in argv else 200
    task, _ = training_task(read_recipe(os.path.join(HERE, "..", "recipes", "deliveries.toml")))
    times = []
    for _ in range(5):
        t0 = time.perf_counter()
        fit = task.solve()
        times.append(time.perf_counter() - t0)
    one = statistics.median(times)
    print(f"one fit: {one:.4f} s (median of 5; route {fit.route}, {fit.status})")
    for jobs in (1, -1):
        boot = fit.bootstrap(refits, seed=0, jobs=jobs, progress=False)
        print(f"{refits} refits, jobs={jobs:>2}: {boot.seconds:.2f} s = {boot.seconds / one:.0f}x one fit; "
              f"{boot.certified} certified; {boot.seconds / refits * 1e3:.1f} ms per refit")


if __name__ == "__main__":
    main(sys.argv[1:])
