"""Several classes against scikit-learn, in the same run (median of --repeat runs, default 3).

    python -m benchmarks.classes            # 20,000 rows x 20 features, 5 classes
    python -m benchmarks.classes --quick    # 2,000 rows

Data: invented, seeded; classes drawn from a multinomial logit with random coefficients.
Cases: l2 multinomial (learnopt newton route) against LogisticRegression (lbfgs, tol 1e-8) at
C = 1/(2 n lam); l1 multinomial against LogisticRegression(penalty="l1", solver="saga") at
C = 1/(n lam) (its intercepts shifted to sum to zero, which leaves its objective); l2 with two
class rules (no peer); l2 multiclass hinge without intercept (direct route) against
LinearSVC(multi_class="crammer_singer", fit_intercept=False, tol 1e-6). Reported: seconds,
ratio learnopt / peer, learnopt's certified gap and the peer's objective minus learnopt's
(both in learnopt's convention, at each one's own coefficients).
"""
from __future__ import annotations

import statistics
import sys
import time

import numpy as np
import pandas as pd

import learnopt as lo
from learnopt.solve.classes_certificate import certify_classes


def table(n: int, d: int = 20, k: int = 5, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, d))
    P = np.exp(X @ rng.normal(size=(d, k)) * 0.5)
    P /= P.sum(axis=1, keepdims=True)
    y = (P.cumsum(axis=1) > rng.random((n, 1))).argmax(axis=1)
    return pd.DataFrame(X, columns=[f"x{j}" for j in range(d)]).assign(y=[f"c{v}" for v in y])


def _timed(fn, repeat):
    times, out = [], None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), out


def main(argv: list[str]) -> None:
    from sklearn.linear_model import LogisticRegression
    from sklearn.svm import LinearSVC

    n = 2000 if "--quick" in argv else 20000
    repeat = int(argv[argv.index("--repeat") + 1]) if "--repeat" in argv else 3
    frame = table(n)
    X, y = frame.drop(columns="y").to_numpy(), frame["y"]
    lam = 1e-3
    rows = []
    task = lo.classification(frame, "y").penalize(lo.penalty.l2(lam))
    ours_s, fit = _timed(task.solve, repeat)
    peer_s, peer = _timed(lambda: LogisticRegression(C=1 / (2 * n * lam), tol=1e-8, max_iter=10_000).fit(X, y), repeat)
    theirs = certify_classes(task, np.concatenate([peer.coef_.ravel(), peer.intercept_])).primal
    rows.append(("l2 multinomial", fit, ours_s, "LogisticRegression (lbfgs)", peer_s, theirs))
    task = lo.classification(frame, "y").penalize(lo.penalty.l1(lam))
    ours_s, fit = _timed(task.solve, repeat)
    peer_s, peer = _timed(lambda: LogisticRegression(penalty="l1", solver="saga", C=1 / (n * lam), tol=1e-6,
                                                     max_iter=10_000).fit(X, y), repeat)
    theirs = certify_classes(task, np.concatenate([peer.coef_.ravel(), peer.intercept_ - peer.intercept_.mean()])).primal
    rows.append(("l1 multinomial", fit, ours_s, "LogisticRegression (saga, tol 1e-6)", peer_s, theirs))
    task = lo.classification(frame, "y").penalize(lo.penalty.l2(lam)).require("x0 >= 0.2 for class 'c1'", "x3 <= 0")
    ours_s, fit = _timed(task.solve, repeat)
    rows.append(("l2 multinomial + 2 rules", fit, ours_s, "none (the whole program in Clarabel: ~100 s)", np.nan,
                 np.nan))
    task = lo.classification(frame, "y", loss="hinge", intercept=False).penalize(lo.penalty.l2(lam))
    ours_s, fit = _timed(task.solve, repeat)
    peer_s, peer = _timed(lambda: LinearSVC(multi_class="crammer_singer", fit_intercept=False, C=1 / (2 * n * lam),
                                            tol=1e-6, max_iter=100_000).fit(X, y), repeat)
    theirs = certify_classes(task, peer.coef_.ravel()).primal
    rows.append(("l2 multiclass hinge, no intercept", fit, ours_s, "LinearSVC (crammer_singer)", peer_s, theirs))
    print(f"| case ({n} x 20, 5 classes) | learnopt route, solver | learnopt s | certified gap | peer | peer s | "
          f"ratio | peer objective - learnopt's |")
    print("|---|---|---|---|---|---|---|---|")
    for name, fit, ours_s, peer_name, peer_s, theirs in rows:
        print(f"| {name} | {fit.route}, {fit.solver} | {ours_s:.3f} | {fit.gap:.1e} | {peer_name} | {peer_s:.3f} | "
              f"{ours_s / peer_s:.2f} | {theirs - fit.objective:.1e} |")


if __name__ == "__main__":
    main(sys.argv[1:])
