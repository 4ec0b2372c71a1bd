"""learnopt against the specialised estimators it replaces, and against plain cvxpy.

Run ``python -m benchmarks`` from the repository root (``--quick`` for smaller sizes,
``--only lasso,hinge`` for some cases). Every case is run side by side in one process on the
same seeded data; each contender's time is the median of ``--repeat`` runs (plain cvxpy: one
run unless ``--plain-repeat``). Every objective is recomputed in learnopt's convention,

    mean_i loss(row i) + penalties        (no 1/2, no 1/n outside the mean)

at the contender's own coefficients, so "objective - best" compares like with like. Peer
scalings converted here: scikit-learn Lasso minimises (1/2n)|r|^2 + alpha|w|_1, so learnopt's
l1 strength is 2 alpha; LogisticRegression minimises C sum log-loss + |w|^2/2, so learnopt's l2
strength is 1/(2Cn); LinearSVC minimises C sum hinge + |w|^2/2 with the intercept penalised
as an extra feature (a slightly different problem, so its objective here is not the optimum of
its own problem); QuantileRegressor minimises mean pinball + alpha|w|_1; HuberRegressor
estimates a scale jointly (a different problem: its row is timing context, not a race);
Poisson/Gamma/TweedieRegressor minimise (1/2n) sum deviance + alpha/2 |w|^2 and learnopt's
log-link losses are the mean half deviance, so learnopt's l2 strength is alpha/2.

Results are printed and written atomically to benchmarks/results.csv and results.json.
"""
from __future__ import annotations

import argparse
import json
import os
import platform
import statistics
import sys
import time
import warnings

import cvxpy as cp
import numpy as np
import pandas as pd

import learnopt as lo
from learnopt.core.files import write_atomic


def _timed(fn, repeat):
    times, out = [], None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), out


def _data(n, d, seed, kind):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, d))
    if kind == "sparse":
        beta = np.where(rng.random(d) < 0.1, rng.normal(size=d) * 3.0, 0.0)
        return X, X @ beta + 1.0 + rng.normal(size=n)
    beta = rng.normal(size=d) * 0.3
    if kind == "class":
        return X, (X @ beta + rng.logistic(size=n) > 0).astype(int)
    return X, X @ beta + 1.0 + rng.standard_t(3, size=n)


def _objective(task, coef, intercept):
    """learnopt's objective for (coef, intercept) on the task's own data."""
    from learnopt.problem.algebra import objective
    return objective(task, np.append(coef, intercept) if task.intercept else np.asarray(coef))


def _plain_cvxpy(task):
    """The same task written the obvious way in cvxpy, default solver choice."""
    ds = task.dataset
    w, b = cp.Variable(ds.d), cp.Variable()
    pred = ds.X @ w + b
    y = ds.y
    loss = {"squared": lambda: cp.sum_squares(pred - y) / ds.n,
            "logistic": lambda: cp.sum(cp.logistic(-cp.multiply(y, pred))) / ds.n,
            "hinge": lambda: cp.sum(cp.pos(1 - cp.multiply(y, pred))) / ds.n,
            "huber": lambda: cp.sum(cp.huber(pred - y, task.loss.delta)) / ds.n,
            "quantile": lambda: cp.sum(cp.maximum(task.loss.tau * (y - pred), (task.loss.tau - 1) * (y - pred))) / ds.n,
            "poisson": lambda: cp.sum(cp.exp(pred) - cp.multiply(y, pred)) / ds.n,
            "gamma": lambda: cp.sum(cp.multiply(y, cp.exp(-pred)) + pred) / ds.n,
            "tweedie": lambda: cp.sum(cp.multiply(y / (task.loss.power - 1), cp.exp((1 - task.loss.power) * pred))
                                      + cp.exp((2 - task.loss.power) * pred) / (2 - task.loss.power)) / ds.n,
            }[task.loss.name]()
    pen = sum(p.expr(w, ds.names) for p in task.penalties) if task.penalties else 0
    cons = [c for r in task.requirements for c in [_constraint(r, w, b)]]
    prob = cp.Problem(cp.Minimize(loss + pen), cons)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        prob.solve()
    return w.value, float(b.value)


def _constraint(r, w, b):
    theta = cp.hstack([w, cp.reshape(b, (1,), order="C")])
    from learnopt.problem.algebra import requirement_constraint
    return requirement_constraint(r, theta)


def case_lasso(n, d, alpha=0.05, rules=()):
    from sklearn.linear_model import Lasso
    X, y = _data(n, d, 0, "sparse")
    names = [f"x{j}" for j in range(d)]
    task = lo.regression(X, y, features=names).penalize(lo.penalty.l1(2 * alpha)).require(*rules)
    peers = {} if rules else {"scikit-learn Lasso": lambda: _sk(Lasso(alpha=alpha).fit(X, y))}
    return task, peers


def case_logistic(n, d, C=1.0):
    from sklearn.linear_model import LogisticRegression
    X, y = _data(n, d, 1, "class")
    task = lo.classification(X, y, loss="logistic").penalize(lo.penalty.l2(1 / (2 * C * n)))
    return task, {"scikit-learn LogisticRegression(lbfgs)":
                  lambda: _sk(LogisticRegression(C=C, max_iter=1000).fit(X, y))}


def case_hinge(n, d, C=1.0):
    from sklearn.svm import LinearSVC
    X, y = _data(n, d, 2, "class")
    task = lo.classification(X, y, loss="hinge").penalize(lo.penalty.l2(1 / (2 * C * n)))
    return task, {"scikit-learn LinearSVC(hinge)":
                  lambda: _sk(LinearSVC(C=C, loss="hinge", dual=True, max_iter=10000).fit(X, y))}


def case_quantile(n, d, tau=0.9):
    from sklearn.linear_model import QuantileRegressor
    X, y = _data(n, d, 3, "heavy")
    task = lo.regression(X, y, loss=lo.loss.quantile(tau))
    return task, {"scikit-learn QuantileRegressor(highs)":
                  lambda: _sk(QuantileRegressor(quantile=tau, alpha=0.0, solver="highs").fit(X, y))}


def case_huber(n, d, delta=1.35):
    from sklearn.linear_model import HuberRegressor
    X, y = _data(n, d, 4, "heavy")
    task = lo.regression(X, y, loss=lo.loss.huber(delta)).penalize(lo.penalty.l2(1e-4))
    return task, {"scikit-learn HuberRegressor (joint scale; other problem)":
                  lambda: _sk(HuberRegressor(epsilon=delta, alpha=1e-4 * n, max_iter=1000).fit(X, y))}


def case_glm(family, n, d, alpha=1e-3):
    from sklearn.linear_model import GammaRegressor, PoissonRegressor, TweedieRegressor
    rng = np.random.default_rng(5)
    X = rng.normal(size=(n, d))
    mu = np.exp(X @ (rng.normal(size=d) * 0.2) + 0.5)
    y = rng.gamma(2.0, mu / 2.0) if family == "gamma" else rng.poisson(mu).astype(float)
    loss, peer = {"poisson": (lo.loss.poisson(), lambda **kw: PoissonRegressor(**kw)),
                  "gamma": (lo.loss.gamma(), lambda **kw: GammaRegressor(**kw)),
                  "tweedie": (lo.loss.tweedie(1.5), lambda **kw: TweedieRegressor(power=1.5, link="log", **kw))}[family]
    task = lo.regression(X, y, loss=loss).penalize(lo.penalty.l2(alpha / 2))
    label = type(peer()).__name__
    return task, {f"scikit-learn {label}(lbfgs)": lambda: _sk(peer(alpha=alpha, max_iter=1000).fit(X, y)),
                  f"scikit-learn {label}(newton-cholesky)":
                  lambda: _sk(peer(alpha=alpha, solver="newton-cholesky", max_iter=1000).fit(X, y))}


def _sk(model):
    return np.ravel(model.coef_), float(np.ravel(model.intercept_)[0]) if np.ndim(model.intercept_) else float(model.intercept_)


RULES10 = tuple(f"x{j} >= 0" for j in range(8)) + ("x0 + x1 + x2 <= 2", "x3 - x4 == 0.5")


def cases(quick: bool):
    s = 10 if quick else 1
    return {
        "lasso": lambda: case_lasso(20000 // s, 200),
        "logistic": lambda: case_logistic(20000 // s, 50),
        "hinge": lambda: case_hinge(20000 // s, 50),
        "quantile": lambda: case_quantile(5000 // s, 20),
        "huber": lambda: case_huber(20000 // s, 50),
        "poisson": lambda: case_glm("poisson", 20000 // s, 20),
        "gamma": lambda: case_glm("gamma", 20000 // s, 20),
        "tweedie": lambda: case_glm("tweedie", 20000 // s, 20),
        "lasso+10 rules": lambda: case_lasso(20000 // s, 200, rules=RULES10),
    }


def run_case(name, make, repeat, plain_repeat, with_plain):
    task, peers = make()
    rows = []
    t, fit = _timed(lambda: task.solve(), repeat)
    rows.append(dict(case=name, contender=f"learnopt ({fit.route}, {fit.solver})", seconds=t,
                     objective=fit.objective, gap=fit.gap, status=fit.status,
                     overhead=(fit.timings.build + fit.timings.certify) / max(fit.timings.total, 1e-12)))
    for peer, fn in peers.items():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            t, (coef, b) = _timed(fn, repeat)
        rows.append(dict(case=name, contender=peer, seconds=t, objective=_objective(task, coef, b),
                         gap=np.nan, status="", overhead=np.nan))
    if with_plain:
        t, (coef, b) = _timed(lambda: _plain_cvxpy(task), plain_repeat)
        rows.append(dict(case=name, contender="plain cvxpy", seconds=t, objective=_objective(task, coef, b),
                         gap=np.nan, status="", overhead=np.nan))
    base = rows[0]["seconds"]
    best = min(r["objective"] for r in rows)
    for r in rows:
        r["ratio_learnopt_to_this"] = base / r["seconds"]
        r["objective_minus_best"] = r["objective"] - best
        r["n"], r["d"] = task.dataset.n, task.dataset.d
    return rows


def selection(quick: bool, repeat: int):
    """A 50-point lasso path and 5-fold cross-validation over 20 strengths, against one fit and
    against scikit-learn's lasso_path / LassoCV on the same strengths (alpha = strength / 2)."""
    from sklearn.linear_model import LassoCV, lasso_path
    task, _ = case_lasso(20000 // (10 if quick else 1), 200)
    X, y = task.dataset.X, task.dataset.y
    one, _ = _timed(lambda: task.solve(), repeat)
    t_path, walk = _timed(lambda: task.path(n=50, progress=False), repeat)
    grid = walk.table["strength"].to_numpy()
    Xc, yc = X - X.mean(0), y - y.mean()
    t_sk, _ = _timed(lambda: lasso_path(Xc, yc, alphas=grid / 2), repeat)
    grid20 = grid[np.linspace(0, 49, 20).round().astype(int)]
    t_cv, cv = _timed(lambda: task.cross_validate(folds=5, grid=grid20, progress=False), 1)
    t_skcv, _ = _timed(lambda: LassoCV(alphas=grid20 / 2, cv=5).fit(X, y), 1)
    return [dict(case="lasso path, 50 strengths", seconds=t_path, one_fit=one, ratio_to_one_fit=t_path / one,
                 peer="scikit-learn lasso_path", peer_seconds=t_sk, ratio_to_peer=t_path / t_sk,
                 certified=int((walk.table["status"] == "optimal").sum())),
            dict(case="5-fold CV, 20 strengths", seconds=t_cv, one_fit=one, ratio_to_one_fit=t_cv / one,
                 peer="scikit-learn LassoCV", peer_seconds=t_skcv, ratio_to_peer=t_cv / t_skcv,
                 certified=int(cv.table["certified_folds"].sum()))]


def centres_case(quick: bool, repeat: int):
    """Unconstrained centres (n=20000, d=2, k=8, 10 restarts) against scikit-learn KMeans
    (n_init=10), and the same with a polygon, a ball, a per-centre rule and a fixed centre."""
    from sklearn.cluster import KMeans
    rng = np.random.default_rng(0)
    n = 20000 // (10 if quick else 1)
    P = rng.normal(size=(n, 2)) * 3 + rng.integers(0, 4, size=(n, 1)) * 4
    t_ours, fit = _timed(lambda: lo.centres(P, k=8).solve(restarts=10), repeat)
    t_sk, km = _timed(lambda: KMeans(8, n_init=10, random_state=0).fit(P), repeat)
    rules = (lo.rule.polygon([(-2, -2), (14, -2), (14, 14), (-2, 14)], features=("x0", "x1")),
             lo.rule.ball((5, 5), 4, features=("x0", "x1")), "centre 3: x0 <= 1")
    t_con, con = _timed(lambda: lo.centres(P, k=8, fixed=[(0, 0)]).require(*rules).solve(restarts=10), repeat)
    return [dict(case="centres n=%d d=2 k=8, 10 restarts" % n, learnopt_s=t_ours, learnopt_objective=fit.objective,
                 peer="scikit-learn KMeans(n_init=10)", peer_s=t_sk, peer_objective=km.inertia_,
                 ratio=t_ours / t_sk),
            dict(case="the same with a polygon, a ball, a per-centre rule, a fixed centre", learnopt_s=t_con,
                 learnopt_objective=con.objective, peer="unconstrained learnopt", peer_s=t_ours,
                 peer_objective=fit.objective, ratio=t_con / t_ours)]


def growth(quick: bool, repeat: int):
    rows = []
    sizes = (1_000, 10_000, 100_000) if quick else (1_000, 10_000, 100_000, 1_000_000)
    for n in sizes:
        task, _ = case_lasso(n, 200)
        t, fit = _timed(lambda: task.solve(), repeat)
        rows.append(dict(n=n, d=200, seconds=t, us_per_row=1e6 * t / n, route=fit.route, status=fit.status))
    return rows


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(prog="python -m benchmarks", description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="one tenth of the sizes")
    ap.add_argument("--only", default="", help="comma-separated case names")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--plain-repeat", type=int, default=1)
    ap.add_argument("--no-plain", action="store_true", help="skip the plain cvxpy contender")
    ap.add_argument("--no-growth", action="store_true", help="skip the growth series")
    args = ap.parse_args(argv)
    wanted = [c for c in args.only.split(",") if c]
    rows = []
    for name, make in cases(args.quick).items():
        if wanted and name not in wanted:
            continue
        print(f"... {name}", file=sys.stderr, flush=True)
        rows += run_case(name, make, args.repeat, args.plain_repeat, not args.no_plain)
    table = pd.DataFrame(rows)
    pd.set_option("display.width", 200)
    if rows:
        print(table.to_string(index=False, float_format=lambda v: f"{v:.4g}"))
    result = {"machine": f"{platform.machine()}, {os.cpu_count()} cores, Python {platform.python_version()}",
              "versions": {"learnopt": lo.__version__, "cvxpy": cp.__version__, "numpy": np.__version__},
              "cases": rows}
    if not wanted or "selection" in wanted:
        sel = selection(args.quick, args.repeat)
        print(pd.DataFrame(sel).to_string(index=False, float_format=lambda v: f"{v:.4g}"))
        result["selection"] = sel
    if not wanted or "centres" in wanted:
        cen = centres_case(args.quick, args.repeat)
        print(pd.DataFrame(cen).to_string(index=False, float_format=lambda v: f"{v:.6g}"))
        result["centres"] = cen
    if not args.no_growth and not wanted:
        g = growth(args.quick, args.repeat)
        print(pd.DataFrame(g).to_string(index=False, float_format=lambda v: f"{v:.4g}"))
        result["growth"] = g
    here = os.path.dirname(os.path.abspath(__file__))
    write_atomic(os.path.join(here, "results.csv"), table.to_csv(index=False))
    write_atomic(os.path.join(here, "results.json"), json.dumps(result, indent=2, default=float))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
