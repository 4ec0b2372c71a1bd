"""Direct route against the specialised estimators a user would otherwise pick.

Ratios (learnopt seconds / peer seconds) from the same run, same data, same objective.
Run: python benchmarks/direct_vs_peers.py [n] [d]
Needs scikit-learn (pip install -e '.[test]'). Not part of the test suite.
"""
from __future__ import annotations

import sys
import time

import numpy as np

import learnopt as lo


def timed(fn):
    t0 = time.perf_counter()
    out = fn()
    return out, time.perf_counter() - t0


def main(n: int = 5000, d: int = 50) -> None:
    from sklearn.linear_model import Lasso, LogisticRegression, Ridge

    rng = np.random.default_rng(0)
    X = rng.normal(size=(n, d))
    beta = rng.normal(size=d) * (rng.random(d) < 0.3)
    y = X @ beta + rng.normal(size=n)
    labels = (X @ beta + rng.normal(size=n) > 0).astype(int)
    rows = []

    alpha = 0.05
    fit, t_lo = timed(lambda: lo.regression(X, y).penalize(lo.penalty.l1(2 * alpha)).solve())
    sk, t_sk = timed(lambda: Lasso(alpha=alpha, tol=1e-10, max_iter=100000).fit(X, y))
    sk_obj = np.mean((y - sk.predict(X)) ** 2) + 2 * alpha * np.abs(sk.coef_).sum()
    rows.append(("lasso", "scikit-learn Lasso", t_lo, t_sk, fit.status, fit.objective - sk_obj))

    lam = 0.01
    fit, t_lo = timed(lambda: lo.regression(X, y).penalize(lo.penalty.l2(lam)).solve())
    sk, t_sk = timed(lambda: Ridge(alpha=lam * n, solver="cholesky").fit(X, y))
    sk_obj = np.mean((y - sk.predict(X)) ** 2) + lam * (sk.coef_ ** 2).sum()
    rows.append(("ridge", "scikit-learn Ridge", t_lo, t_sk, fit.status, fit.objective - sk_obj))

    C = 1.0
    fit, t_lo = timed(lambda: lo.classification(X, labels, loss="logistic")
                      .penalize(lo.penalty.l2(1.0 / (2 * C * n))).solve())
    sk, t_sk = timed(lambda: LogisticRegression(C=C, tol=1e-10, max_iter=10000).fit(X, labels))
    m = np.where(labels == 1, 1, -1) * sk.decision_function(X)
    sk_obj = np.mean(np.logaddexp(0, -m)) + (sk.coef_ ** 2).sum() / (2 * C * n)
    rows.append(("l2-logistic", "scikit-learn LogisticRegression (lbfgs)", t_lo, t_sk, fit.status,
                 fit.objective - sk_obj))

    print(f"n={n}, d={d}")
    print(f"{'task':<12} {'peer':<42} {'learnopt s':>10} {'peer s':>8} {'ratio':>7} {'status':>9} {'obj - peer obj':>15}")
    for task, peer, a, b, status, diff in rows:
        print(f"{task:<12} {peer:<42} {a:>10.3f} {b:>8.3f} {a / b:>7.1f} {status:>9} {diff:>15.2e}")


if __name__ == "__main__":
    args = [int(a) for a in sys.argv[1:3]]
    main(*args)
