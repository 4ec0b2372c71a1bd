"""Checks run over every registered building block (common practice: property tables)."""
import cvxpy as cp
import numpy as np
import pytest

import learnopt as lo

LOSSES = [lo.loss.squared(), lo.loss.absolute(), lo.loss.huber(0.7), lo.loss.quantile(0.2),
          lo.loss.epsilon_insensitive(0.3), lo.loss.hinge(), lo.loss.squared_hinge(), lo.loss.logistic()]
NAMES = ("a", "b", "c", "d")
PENALTIES = [lo.penalty.l1(0.3), lo.penalty.l2(0.2), lo.penalty.elastic_net(0.4, 0.3),
             lo.penalty.l1(0.3, weights={"a": 0.0, "b": 2.0}),
             lo.penalty.group(0.5, [["a", "b"], ["c"]]), lo.penalty.total_variation(0.6, ["a", "b", "c", "d"])]
Z = np.linspace(-3.0, 3.0, 41)


@pytest.mark.parametrize("loss", LOSSES, ids=lambda l: l.describe())
def test_numpy_value_equals_cvxpy_value(loss):
    z = cp.Variable(Z.size)
    z.value = Z
    np.testing.assert_allclose(loss.expr(z).value, loss.value(Z), rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("loss", LOSSES, ids=lambda l: l.describe())
def test_declared_facts_match_cvxpy(loss):
    expr = loss.expr(cp.Variable(5))
    assert expr.is_convex()
    assert expr.is_pwl() == (loss.cone == "linear")


@pytest.mark.parametrize("loss", LOSSES, ids=lambda l: l.describe())
def test_fenchel_young(loss):
    # f(z) + f*(u) >= z u for u in dom f*, with equality at u = f'(z) (common practice: Fenchel-Young)
    rng = np.random.default_rng(0)
    low, high = loss.dual_domain()
    u = rng.uniform(max(low, -5), min(high, 5), size=200)
    for z in Z:
        assert np.all(loss.value(np.array([z])) + loss.conjugate(u) >= z * u - 1e-12)
    g = loss.gradient(Z)
    np.testing.assert_allclose(loss.value(Z) + loss.conjugate(g), Z * g, atol=1e-10)
    assert np.all(np.isinf(loss.conjugate(np.array([high + 1.0])))) or not np.isfinite(high)


@pytest.mark.parametrize("loss", [l for l in LOSSES if l.smooth], ids=lambda l: l.describe())
def test_gradient_matches_finite_differences(loss):
    z = Z[np.abs(np.abs(Z) - 0.7) > 0.05]
    h = 1e-6
    fd = (loss.value(z + h) - loss.value(z - h)) / (2 * h)
    np.testing.assert_allclose(loss.gradient(z), fd, atol=1e-5)


@pytest.mark.parametrize("loss", [l for l in LOSSES if l.smooth], ids=lambda l: l.describe())
def test_curvature_matches_finite_differences(loss):
    # the newton route's Hessian: f'' by central differences of f', away from the kinks of f'
    z = Z[(np.abs(np.abs(Z) - 0.7) > 0.05) & (np.abs(Z - 1.0) > 0.05)]
    h = 1e-6
    fd = (loss.gradient(z + h) - loss.gradient(z - h)) / (2 * h)
    np.testing.assert_allclose(loss.curvature(z), fd, atol=1e-5)


@pytest.mark.parametrize("pen", PENALTIES, ids=lambda p: p.describe())
def test_penalty_numpy_equals_cvxpy(pen):
    w = cp.Variable(4)
    w.value = np.array([0.5, -1.2, 2.0, 0.1])
    assert pen.expr(w, NAMES).value == pytest.approx(pen.value(w.value, NAMES), rel=1e-12)
    assert pen.expr(w, NAMES).is_convex()


@pytest.mark.parametrize("pen", PENALTIES, ids=lambda p: p.describe())
def test_penalty_conjugate_fenchel_young(pen):
    # R(w) + R*(g) >= g.w for all w, g (common practice: Fenchel-Young)
    rng = np.random.default_rng(1)
    for _ in range(50):
        w, g = rng.normal(size=4), rng.normal(size=4) * 0.3
        N = pen.null_space(NAMES)
        if N.shape[1]:
            assert not np.isfinite(pen.conjugate(g, NAMES)) or np.allclose(N.T @ g, 0)
            g = g - N @ (N.T @ g)   # R* is finite only off the flat directions
        s = pen.shrink(g, NAMES)
        conj = pen.conjugate(s * g, NAMES)
        assert np.isfinite(conj)
        assert pen.value(w, NAMES) + conj >= s * g @ w - 1e-12


@pytest.mark.parametrize("pen", PENALTIES, ids=lambda p: p.describe())
def test_penalty_null_space_is_flat(pen):
    N = pen.null_space(NAMES)
    w = np.array([0.5, -1.2, 2.0, 0.1])
    for k in range(N.shape[1]):
        assert pen.value(w + 3.0 * N[:, k], NAMES) == pytest.approx(pen.value(w, NAMES), abs=1e-12)


@pytest.mark.parametrize("loss", [l for l in LOSSES if l.argument == "residual"], ids=lambda l: l.describe())
@pytest.mark.parametrize("pen", [None] + PENALTIES, ids=lambda p: "none" if p is None else p.describe())
def test_certificate_bounds_suboptimality_regression(loss, pen):
    _check_certificate(loss, pen, classify=False)


@pytest.mark.parametrize("loss", [l for l in LOSSES if l.argument == "margin"], ids=lambda l: l.describe())
@pytest.mark.parametrize("pen", [None] + PENALTIES[:3], ids=lambda p: "none" if p is None else p.describe())
def test_certificate_bounds_suboptimality_classification(loss, pen):
    _check_certificate(loss, pen, classify=True)


def _check_certificate(loss, pen, classify):
    # the certificate is a valid bound: P(loose) - P(tight) <= gap(loose); tight solves certify
    rng = np.random.default_rng(7)
    X = rng.normal(size=(60, 4))
    signal = X @ np.array([1.0, -0.5, 0.0, 2.0]) + 0.5 * rng.normal(size=60)
    y = np.where(signal > 0, 1, 0) if classify else signal
    build = lo.classification if classify else lo.regression
    task = build(X, y, loss=loss, features=NAMES).require("a + b <= 1.5", "d >= -5")
    if pen is not None:
        task = task.penalize(pen)
    tight = task.solve(tol=1e-10)
    assert tight.status == "optimal", tight.message
    for solver in ("scs", "osqp"):
        try:
            loose = task.solve(solver=solver, tol=1e-3, fallback=False)
        except lo.SolverError:
            continue  # solver cannot handle this class (e.g. OSQP and exponential cones)
        if loose.status in ("optimal", "unverified") and loose.violation <= 1e-9:
            assert loose.objective - tight.objective <= loose.gap + 1e-9
