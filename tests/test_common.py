"""Checks run over every registered building block (common practice: property tables).

The blocks come from the registries (``lo.loss.LOSSES``, ``lo.penalty.PENALTIES``), so a new
registry row is checked here without touching this file.
"""
import json
import warnings

import cvxpy as cp
import numpy as np
import pytest

import learnopt as lo
from learnopt.terms.registry import EXAMPLE_NAMES

LOSSES = [ex for spec in lo.loss.LOSSES.values() if spec.convex for ex in spec.examples]
NAMES = EXAMPLE_NAMES
PENALTIES = [ex for spec in lo.penalty.PENALTIES.values() for ex in spec.examples]
FIRST_PENALTIES = [spec.examples[0] for spec in lo.penalty.PENALTIES.values()]
Z = np.linspace(-3.0, 3.0, 41)
TARGET = 1.3     # every row's target, for the losses that hold one (inside every family's support)


def per_row(loss, n):
    """The loss on n rows (losses of the linear predictor bind a target per row; others are unchanged)."""
    return loss.given(np.full(n, TARGET))


@pytest.mark.parametrize("loss", LOSSES, ids=lambda l: l.describe())
def test_numpy_value_equals_cvxpy_value(loss):
    z = cp.Variable(Z.size)
    z.value = Z
    rows = per_row(loss, Z.size)
    np.testing.assert_allclose(rows.expr(z).value, rows.value(Z), rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("loss", LOSSES, ids=lambda l: l.describe())
def test_declared_facts_match_cvxpy(loss):
    expr = per_row(loss, 5).expr(cp.Variable(5))
    assert expr.is_convex()
    assert expr.is_pwl() == (loss.cone == "linear")


@pytest.mark.parametrize("loss", LOSSES, ids=lambda l: l.describe())
def test_fenchel_young(loss):
    # f(z) + f*(u) >= z u for u in dom f*, with equality at u = f'(z) (common practice: Fenchel-Young)
    rng = np.random.default_rng(0)
    one, many, on_z = per_row(loss, 1), per_row(loss, 200), per_row(loss, Z.size)
    low, high = (float(np.max(end)) for end in one.dual_domain())
    u = rng.uniform(max(low, -5), min(high, 5), size=200)
    for z in Z:
        assert np.all(one.value(np.array([z])) + many.conjugate(u) >= z * u - 1e-12)
    g = on_z.gradient(Z)
    np.testing.assert_allclose(on_z.value(Z) + on_z.conjugate(g), Z * g, atol=1e-10)
    assert np.all(np.isinf(one.conjugate(np.array([high + 1.0])))) or not np.isfinite(high)


@pytest.mark.parametrize("loss", [l for l in LOSSES if l.smooth], ids=lambda l: l.describe())
def test_gradient_matches_finite_differences(loss):
    z = Z[np.abs(np.abs(Z) - 0.7) > 0.05]
    h = 1e-6
    loss = per_row(loss, z.size)
    fd = (loss.value(z + h) - loss.value(z - h)) / (2 * h)
    np.testing.assert_allclose(loss.gradient(z), fd, atol=1e-5)


@pytest.mark.parametrize("loss", [l for l in LOSSES if l.smooth], ids=lambda l: l.describe())
def test_curvature_matches_finite_differences(loss):
    # the newton route's Hessian: f'' by central differences of f', away from the kinks of f'
    z = Z[(np.abs(np.abs(Z) - 0.7) > 0.05) & (np.abs(Z - 1.0) > 0.05)]
    h = 1e-6
    loss = per_row(loss, z.size)
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
@pytest.mark.parametrize("pen", [None] + FIRST_PENALTIES, ids=lambda p: "none" if p is None else p.describe())
def test_certificate_bounds_suboptimality_classification(loss, pen):
    _check_certificate(loss, pen, classify=True)


@pytest.mark.parametrize("loss", [l for l in LOSSES if l.argument == "linear"], ids=lambda l: l.describe())
@pytest.mark.parametrize("pen", [None] + FIRST_PENALTIES, ids=lambda p: "none" if p is None else p.describe())
def test_certificate_bounds_suboptimality_log_link(loss, pen):
    _check_certificate(loss, pen, classify=False, counts=True)


def _check_certificate(loss, pen, classify, counts=False):
    # the certificate is a valid bound: P(loose) - P(tight) <= gap(loose); tight solves certify
    rng = np.random.default_rng(7)
    X = rng.normal(size=(60, 4))
    signal = X @ np.array([1.0, -0.5, 0.0, 2.0]) + 0.5 * rng.normal(size=60)
    y = np.where(signal > 0, 1, 0) if classify else signal
    if counts:                       # counts (with zeros) or positive amounts for the log-link losses
        y = rng.poisson(np.exp(signal / 3)) + (0.5 if loss.name == "gamma" else 0.0)
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


# ----------------------------------------------------------------------------- the registries

def test_every_registry_row_has_examples_made_by_its_own_constructor():
    for name, spec in lo.loss.LOSSES.items():
        assert spec.examples and spec.factory().name == name
        assert all(type(ex) is type(spec.factory()) for ex in spec.examples)
    for name, spec in lo.penalty.PENALTIES.items():
        assert spec.examples and spec.required[0] == "strength" and "factors" in spec.parameters
        assert all(ex.describe().startswith(f"{name}(strength=") for ex in spec.examples)


def test_by_name_knows_every_row_and_alias():
    for name, spec in lo.loss.LOSSES.items():
        assert lo.loss.by_name(name) == spec.factory()
        for alias in spec.aliases:
            assert lo.loss.by_name(alias) == spec.factory()
    with pytest.raises(lo.ParameterError, match="nearest known: squared_hinge"):
        lo.loss.by_name("squared_hinj")


def test_for_kind_lists_the_fittable_losses_of_each_kind():
    assert lo.loss.for_kind("regression") == ("squared", "absolute", "huber", "quantile", "epsilon_insensitive",
                                              "poisson", "gamma", "tweedie")
    assert lo.loss.for_kind("classification") == ("squared", "hinge", "squared_hinge", "logistic")
    with pytest.raises(lo.ParameterError, match=r"for_kind\(kind='ranking'\): kind has to be one of 'regression', 'classification'"):
        lo.loss.for_kind("ranking")


def _tiny(kind, positive=False):
    rng = np.random.default_rng(3)
    X = rng.normal(size=(30, 2))
    y = X @ np.array([1.0, -1.0]) + 0.2 * rng.normal(size=30)
    if positive and kind == "regression":     # amounts for the log-link losses
        y = np.exp(y)
    return (X, y) if kind == "regression" else (X, np.where(y > 0, "yes", "no"))


@pytest.mark.parametrize("name", list(lo.loss.LOSSES))
def test_each_loss_is_accepted_by_its_kinds_and_refused_by_the_others(name):
    spec = lo.loss.LOSSES[name]
    builders = {"regression": lo.regression, "classification": lo.classification}
    for kind, build in builders.items():
        X, y = _tiny(kind, positive=spec.factory().argument == "linear")
        for loss in (name, spec.examples[-1]):
            if not spec.convex:
                with pytest.raises(lo.NotConvexError, match="not convex|non-convex"):
                    build(X, y, loss)
            elif kind in spec.kinds:
                fit = build(X, y, loss).solve()
                assert fit.status == "optimal", fit.message
                assert name in lo.loss.for_kind(kind)
            else:
                with pytest.raises(lo.ParameterError) as info:
                    build(X, y, loss)
                message = str(info.value)
                assert name in message and kind in message
                assert name not in lo.loss.for_kind(kind)


# ----------------------------------------------------------------------------- renamed keywords

OLD_AND_NEW = [
    (lambda: lo.penalty.l1(lam=0.3), lambda: lo.penalty.l1(strength=0.3)),
    (lambda: lo.penalty.l2(lam=0.2), lambda: lo.penalty.l2(0.2)),
    (lambda: lo.penalty.elastic_net(lam=0.4, mix=0.3), lambda: lo.penalty.elastic_net(0.4, 0.3)),
    (lambda: lo.penalty.group(lam=0.5, groups=[["a", "b"]]), lambda: lo.penalty.group(0.5, [["a", "b"]])),
    (lambda: lo.penalty.total_variation(lam=0.6, names=["a", "b"]),
     lambda: lo.penalty.total_variation(0.6, ["a", "b"])),
    (lambda: lo.penalty.l1(0.3, weights={"a": 2.0}), lambda: lo.penalty.l1(0.3, factors={"a": 2.0})),
    (lambda: lo.penalty.elastic_net(0.3, weights=[1.0, 0.0, 2.0, 1.0]),
     lambda: lo.penalty.elastic_net(0.3, factors=[1.0, 0.0, 2.0, 1.0])),
    (lambda: lo.penalty.group(0.5, [["a"], ["b"]], weights=[1.0, 2.0]),
     lambda: lo.penalty.group(0.5, [["a"], ["b"]], factors=[1.0, 2.0])),
    (lambda: lo.penalty.total_variation(0.6, ["a", "b", "c"], weights=[1.0, 0.0]),
     lambda: lo.penalty.total_variation(0.6, ["a", "b", "c"], factors=[1.0, 0.0])),
]


@pytest.mark.parametrize("old,new", OLD_AND_NEW, ids=[f"case{k}" for k in range(len(OLD_AND_NEW))])
def test_old_keyword_still_works_with_a_deprecation_warning(old, new):
    with pytest.warns(DeprecationWarning, match="is now called .* removed in the next"):
        before = old()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        after = new()
    assert before == after
    w = np.array([0.5, -1.2, 2.0, 0.1])
    assert before.value(w, NAMES) == after.value(w, NAMES)


@pytest.mark.parametrize("make", [
    lambda: lo.penalty.l1(0.3, lam=0.3),
    lambda: lo.penalty.l1(strength=0.3, lam=0.3),
    lambda: lo.penalty.group(0.5, [["a"]], lam=0.5),
    lambda: lo.penalty.l2(0.2, factors=[1.0], weights=[1.0]),
])
def test_old_and_new_keyword_together_is_a_parameter_error(make):
    with pytest.raises(lo.ParameterError, match="both .* and its old name"):
        make()


def test_old_attribute_names_read_with_a_deprecation_warning():
    pen = lo.penalty.elastic_net(0.4, 0.3, factors={"b": 2.0})
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert pen.strength == 0.4 and pen.factors == (("b", 2.0),)
        assert pen.describe() == "elastic_net(strength=0.4, mix=0.3)"
    with pytest.warns(DeprecationWarning, match="penalty.strength"):
        assert pen.lam == 0.4
    with pytest.warns(DeprecationWarning, match="penalty.factors"):
        assert pen.weights == (("b", 2.0),)
    with pytest.warns(DeprecationWarning):
        assert type(pen)(lam=0.4, mix=0.3, weights=(("b", 2.0),)) == pen


def test_a_model_file_written_with_the_old_field_names_still_loads(tmp_path):
    rng = np.random.default_rng(5)
    X = rng.normal(size=(40, 4))
    y = X @ np.array([1.0, 0.0, -2.0, 0.5]) + 0.1 * rng.normal(size=40)
    fit = (lo.regression(X, y, features=NAMES)
           .penalize(lo.penalty.l1(0.05, factors={"a": 0.0}), lo.penalty.group(0.1, [["b", "c"]])).solve())
    fit.save(tmp_path / "new.json")
    saved = json.loads((tmp_path / "new.json").read_text())
    for piece in saved["task"]["penalties"]:
        fields = piece["fields"]
        fields["lam"], fields["weights"] = fields.pop("strength"), fields.pop("factors")
    (tmp_path / "old.json").write_text(json.dumps(saved))
    with pytest.warns(DeprecationWarning):
        back = lo.load_fit(tmp_path / "old.json")
    assert back.task.penalties == fit.task.penalties
    np.testing.assert_array_equal(back.predict(X), fit.predict(X))


@pytest.mark.parametrize("make,parameter", [
    (lambda: lo.penalty.l1(0.1, factors={"a": -1.0}), "factors"),
    (lambda: lo.penalty.l1(0.1, factors="ab"), "factors"),
    (lambda: lo.penalty.group(0.1, [["a"], ["b"]], factors=[1.0]), "factors"),
    (lambda: lo.penalty.group(0.1, "ab"), "groups"),
    (lambda: lo.penalty.group(0.1, [["a", ["b"]]]), "groups"),
    (lambda: lo.penalty.total_variation(0.1, ["a"]), "names"),
    (lambda: lo.penalty.elastic_net(0.1, "half"), "mix"),
    (lambda: lo.penalty.l1(), None),
    (lambda: lo.penalty.l1(0.1, factor=[1.0]), None),
])
def test_malformed_penalty_arguments_are_parameter_errors(make, parameter):
    with pytest.raises(lo.ParameterError) as info:
        make()
    if parameter is not None:
        assert f"({parameter}=" in str(info.value) and f"): {parameter} has to be " in str(info.value)
        assert info.value.parameters == (parameter,) and len(info.value.demands) == 1
    else:
        assert "it takes strength, factors" in str(info.value)
