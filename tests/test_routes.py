"""Routes agree with the direct route: same optimum, same certificate, same rules.

The direct route is one cvxpy problem over every row; each structure-exploiting route must
reach the same objective (common practice: an exact reformulation has the same optimum).
"""
import cvxpy as cp
import numpy as np
import pandas as pd
import pytest

import learnopt as lo
from learnopt.solve.routes import REGISTRY, ROUTES

NAMES = ["a", "b", "c", "d"]
PENALTIES = [None, lo.penalty.l1(0.05), lo.penalty.l2(0.1), lo.penalty.elastic_net(0.05, 0.05),
             lo.penalty.group(0.1, [["a", "b"], ["c"]]), lo.penalty.total_variation(0.05, NAMES)]
RULES = [(), ("a >= 0", "b <= 0.2"), ("a + b + c == 1",), ("norm2(a, b) <= 0.8",),
         ("prediction >= 0 where a > 1",)]


def _data(classify, seed=3, n=150):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 4))
    signal = X @ np.array([1.0, -0.5, 0.3, 2.0]) + 0.7 * rng.normal(size=n)
    return X, (np.where(signal > 0, 1, 0) if classify else signal)


def _frame(classify):
    X, y = _data(classify)
    df = pd.DataFrame(X, columns=NAMES)
    df["y"] = y
    return df


CASES = [(lo.loss.squared(), False), (lo.loss.huber(0.8), False), (lo.loss.logistic(), True),
         (lo.loss.squared_hinge(), True), (lo.loss.absolute(), False), (lo.loss.quantile(0.3), False),
         (lo.loss.epsilon_insensitive(0.2), False), (lo.loss.hinge(), True)]


@pytest.mark.parametrize("loss,classify", CASES, ids=[c[0].describe() for c in CASES])
@pytest.mark.parametrize("pen", PENALTIES, ids=lambda p: "none" if p is None else p.describe())
@pytest.mark.parametrize("rules", RULES, ids=lambda r: "|".join(r) or "no-rules")
def test_routes_agree_with_direct(loss, classify, pen, rules):
    build = lo.classification if classify else lo.regression
    task = build(_frame(classify), "y", loss=loss).require(*rules)
    if pen is not None:
        task = task.penalize(pen)
    ref = task.solve(route="direct", tol=1e-10)
    assert ref.status == "optimal", ref.message
    for route in ROUTES:
        if route == "direct" or REGISTRY[route].eligible(task) is not None:
            continue
        fit = task.solve(route=route, tol=1e-10)
        assert fit.route == route
        assert fit.status == "optimal", (route, fit.message)
        assert fit.objective == pytest.approx(ref.objective, rel=1e-7, abs=1e-9), route
        assert fit.violation <= 1e-6
        for rule in rules:
            assert fit.binding[rule] == ref.binding[rule] or abs(ref.prices[rule]) < 1e-6, (route, rule)


def test_planner_names_the_route():
    X, y = _data(False)
    assert lo.regression(X, y).solve().route == "compressed"
    assert lo.regression(X, y, loss=lo.loss.huber(1.0)).solve().route == "newton"
    assert lo.classification(X, y > 0, loss="logistic").solve().route == "newton"
    with pytest.raises(lo.ParameterError, match="compressed route cannot solve this task: it needs the squared"):
        lo.regression(X, y, loss="absolute").solve(route="compressed")
    with pytest.raises(lo.ParameterError, match=r"solve\(route='fast'\): route has to be one of 'direct'"):
        lo.regression(X, y).solve(route="fast")


def test_compressed_uses_qr_when_gram_is_ill_conditioned():
    # a design whose Gram matrix squares a condition number of ~1e6: the QR factor is used
    # and the answer matches numpy's lstsq (reference: numpy.linalg.lstsq, SVD based)
    from learnopt.solve.routes.compressed import factor
    t = np.linspace(0.0, 1.0, 200)
    X = np.column_stack([t ** k for k in range(1, 7)])
    coef = np.array([1.0, -2.0, 3.0, -1.0, 0.5, 2.0])
    y = 1.0 + X @ coef
    task = lo.regression(X, y)
    assert factor(task)[2] == "qr"
    fit = task.solve(tol=1e-12)
    ref = np.linalg.lstsq(np.column_stack([X, np.ones(200)]), y, rcond=None)[0]
    np.testing.assert_allclose(fit.coef.to_numpy(), ref[:6], rtol=1e-5, atol=1e-6)


def test_weights_and_sparse_on_fast_routes():
    import scipy.sparse as sp
    X, y = _data(False)
    w = np.random.default_rng(0).integers(1, 4, size=len(y)).astype(float)
    for loss in ("squared", lo.loss.huber(0.8)):
        dense = lo.regression(X, y, loss=loss, weights=w).penalize(lo.penalty.l1(0.02)).solve()
        sparse = lo.regression(sp.csr_matrix(X), y, loss=loss, weights=w).penalize(lo.penalty.l1(0.02)).solve()
        direct = lo.regression(X, y, loss=loss, weights=w).penalize(lo.penalty.l1(0.02)).solve(route="direct")
        assert dense.route != "direct" and sparse.route == dense.route
        assert dense.objective == pytest.approx(direct.objective, rel=1e-8)
        assert sparse.objective == pytest.approx(direct.objective, rel=1e-8)


@pytest.mark.parametrize("loss,classify", [(lo.loss.hinge(), True), (lo.loss.absolute(), False),
                                           (lo.loss.quantile(0.8), False), (lo.loss.epsilon_insensitive(0.3), False)],
                         ids=["hinge", "absolute", "quantile", "epsilon_insensitive"])
def test_working_set_folds_rows_and_stays_exact(loss, classify):
    # enough rows that most are folded into the linear term; the answer must match the direct route
    rng = np.random.default_rng(5)
    n = 6000
    df = pd.DataFrame(rng.normal(size=(n, 4)), columns=NAMES)
    signal = df.to_numpy() @ np.array([1.0, -0.5, 0.3, 2.0]) + rng.standard_t(4, size=n)
    df["y"] = np.where(signal > 0, 1, 0) if classify else signal
    build = lo.classification if classify else lo.regression
    task = build(df, "y", loss=loss).penalize(lo.penalty.l2(1e-3)).require("a >= 1.05", "b + c <= 0")
    fit = task.solve()
    assert fit.route == "working-set" and fit.status == "optimal", fit.message
    assert fit.extras["working_rows"] < n / 2
    ref = task.solve(route="direct")
    assert fit.objective == pytest.approx(ref.objective, rel=1e-7)
    assert fit.prices["a >= 1.05"] == pytest.approx(ref.prices["a >= 1.05"], rel=1e-4, abs=1e-7)


def test_piecewise_linear_losses_declare_their_kinks():
    # each linear piece is a minorant of the loss (convexity, common practice), and the loss is
    # affine between kinks: the two facts the working-set fold relies on
    z = np.linspace(-4, 4, 801)
    for loss in (lo.loss.hinge(), lo.loss.absolute(), lo.loss.quantile(0.3), lo.loss.epsilon_insensitive(0.5)):
        kinks = np.asarray(loss.kinks())
        assert loss.cone == "linear"
        away = z[np.min(np.abs(z[:, None] - kinks[None, :]), axis=1) > 1e-3]
        for z0 in away[::40]:
            piece = loss.value(np.array([z0])) + loss.gradient(np.array([z0])) * (z - z0)
            assert np.all(piece <= loss.value(z) + 1e-12)
        second = np.diff(loss.value(away), 2)
        assert np.sum(np.abs(second) > 1e-9) <= 2 * len(kinks)
    for loss in (lo.loss.squared(), lo.loss.logistic(), lo.loss.huber(1.0)):
        assert loss.kinks() is None


def test_direct_route_refuses_what_would_not_fit_in_memory(monkeypatch):
    from learnopt.solve.routes import direct, prepare
    X, y = _data(False)
    task = lo.regression(X, y, loss="absolute")
    direct.check_size(task, available=1e12)                  # plenty: no complaint
    with pytest.raises(lo.TooLargeError, match="GiB"):
        direct.check_size(task, available=1e5)
    # through the planner, the message names a route that never compiles the whole design
    monkeypatch.setattr(direct, "_available_bytes", lambda: 1e5)
    with pytest.raises(lo.TooLargeError, match="use route='working-set'"):
        prepare(task, "direct")
    with pytest.raises(lo.TooLargeError, match="sample rows, or shard"):
        prepare(lo.regression(X, y, loss=lo.loss.custom(lambda z: cp.abs(z))), "direct")


def test_certificate_on_the_factor_agrees_with_the_one_on_every_row():
    # the compressed route's certificate works on ||R theta - r||^2 + constant; on the same
    # point it must give the dual bound of the full-data certificate (same quadratic)
    from learnopt.solve.routes import prepare
    from learnopt.solve.certificate import certify_point
    X, y = _data(False, n=400)
    task = lo.regression(X, y).penalize(lo.penalty.l1(0.05)).require("x0 >= 0.2", "x1 + x2 <= 0")
    fit = task.solve()
    assert fit.route == "compressed"
    runner = prepare(task, None)
    theta = np.append(fit.coef.to_numpy(), fit.intercept)
    mults = fit.extras["multipliers"]
    small, full = runner.certify(theta, None, mults), certify_point(task, theta, None, mults)
    assert small.primal == pytest.approx(full.primal, rel=1e-12)
    assert small.dual == pytest.approx(full.dual, rel=1e-9)
    assert small.rel_gap <= 1e-8 and full.rel_gap <= 1e-8


def test_large_ill_conditioned_sparse_design_is_not_densified(monkeypatch):
    # common practice: with the limit lowered, an ill-conditioned sparse design takes the
    # eigenvalue factor of the Gram matrix instead of a dense QR, and reaches the same optimum
    import scipy.sparse as sp
    from learnopt.solve.routes import compressed
    t = np.linspace(0.0, 1.0, 300)
    X = np.column_stack([t ** k for k in range(1, 7)])
    y = 1.0 + X @ np.array([1.0, -2.0, 3.0, -1.0, 0.5, 2.0]) + 0.01 * np.sin(40 * t)
    monkeypatch.setattr(compressed, "QR_DENSE_LIMIT", 100)
    task = lo.regression(sp.csr_matrix(X), y).penalize(lo.penalty.l1(1e-4))
    assert compressed.factor(task)[2] == "gram-eig"
    fit = task.solve()
    ref = lo.regression(X, y).penalize(lo.penalty.l1(1e-4)).solve(route="direct")
    assert fit.route == "compressed" and fit.status == "optimal"
    assert abs(fit.objective - ref.objective) <= fit.gap + ref.gap + 1e-15   # both certified
