"""Shaped effects of one feature (task.shape): the basis, its rules, prediction on new data and
from model files, recipes, and the errors. Outside references are named beside each check."""
import json

import cvxpy as cp
import numpy as np
import pandas as pd
import pytest
from sklearn.isotonic import IsotonicRegression

import learnopt as lo
from learnopt.core.errors import DataError, LearnoptError, ParameterError


def _frame(n=200, seed=0):
    rng = np.random.default_rng(seed)
    x = rng.uniform(0.0, 10.0, n)
    z = rng.normal(size=n)
    y = np.sqrt(x) + 0.5 * z + rng.normal(scale=0.3, size=n)
    return pd.DataFrame({"distance_km": x, "z": z, "y": y})


def test_increasing_steps_equal_isotonic_regression():
    # reference: scikit-learn IsotonicRegression (least-squares monotone fit)
    rng = np.random.default_rng(1)
    x = rng.uniform(0, 5, 80)
    y = np.log1p(x) + rng.normal(scale=0.4, size=80)
    df = pd.DataFrame({"x": x, "y": y})
    fit = lo.regression(df, "y").shape("x", "increasing", form="steps", pieces=1000).solve()
    assert fit.status == "optimal"
    want = IsotonicRegression().fit(x, y).predict(x)
    assert np.max(np.abs(fit.predict(df).to_numpy() - want)) < 1e-6


def _hand_lines(x, y, knots, convex=False, increasing=False, concave=False):
    # reference: an independent cvxpy formulation, solved by Clarabel: f(x) = a + b x + sum c_j (x - k_j)_+
    a, b, c = cp.Variable(), cp.Variable(), cp.Variable(len(knots))
    H = np.maximum(x[:, None] - np.asarray(knots)[None, :], 0.0)
    cons = []
    if convex:
        cons.append(c >= 0)
    if concave:
        cons.append(c <= 0)
    if increasing:   # slopes b, b + c1, b + c1 + c2, ... all >= 0
        cons += [b >= 0] + [b + cp.sum(c[:j + 1]) >= 0 for j in range(len(knots))]
    cp.Problem(cp.Minimize(cp.sum_squares(y - a - b * x - H @ c) / len(x)), cons).solve(solver=cp.CLARABEL,
                                                                                        tol_gap_abs=1e-12,
                                                                                        tol_gap_rel=1e-12,
                                                                                        tol_feas=1e-12)
    return a.value + b.value * x + H @ c.value


def test_convex_lines_equal_an_independent_formulation():
    rng = np.random.default_rng(2)
    x = rng.uniform(-3, 3, 150)
    y = 0.5 * x ** 2 - x + rng.normal(scale=0.8, size=150)
    df = pd.DataFrame({"x": x, "y": y})
    fit = lo.regression(df, "y").shape("x", "convex", pieces=6).solve()
    assert fit.status == "optimal"
    knots = fit.task.dataset.encoding.shapes["x"].knots
    assert len(knots) == 5
    want = _hand_lines(x, y, knots, convex=True)
    assert np.max(np.abs(fit.predict(df).to_numpy() - want)) < 1e-6


def test_increasing_concave_lines_equal_an_independent_formulation():
    rng = np.random.default_rng(3)
    x = rng.uniform(0, 8, 150)
    y = np.minimum(x, 4.0) + rng.normal(scale=0.7, size=150)
    y[x > 6] -= 1.5          # a dip the shape has to flatten
    df = pd.DataFrame({"x": x, "y": y})
    fit = lo.regression(df, "y").shape("x", "increasing and concave").solve()
    assert fit.status == "optimal"
    knots = fit.task.dataset.encoding.shapes["x"].knots
    want = _hand_lines(x, y, knots, increasing=True, concave=True)
    assert np.max(np.abs(fit.predict(df).to_numpy() - want)) < 1e-6
    assert fit.binding.any()                  # the dip makes the shape hold the fit back


@pytest.mark.parametrize("shape, loss, form", [
    ("increasing concave", "squared", "lines"), ("decreasing", "huber", "lines"),
    ("convex", "quantile", "lines"), ("decreasing convex", "squared", "lines"),
    ("increasing", "absolute", "steps")])
def test_shape_holds_on_a_fine_grid(shape, loss, form):
    df = _frame()
    df["y"] = df["y"] * (-1 if "decreasing" in shape else 1) + (df["distance_km"] - 5) ** 2 * 0.05
    lossobj = {"huber": lo.loss.huber(1.0), "quantile": lo.loss.quantile(0.3)}.get(loss, loss)
    fit = lo.regression(df, "y", lossobj).shape("distance_km", shape, form=form).solve()
    assert fit.status == "optimal"
    new = pd.DataFrame({"distance_km": np.linspace(-2, 12, 2001), "z": 0.0})
    f = fit.predict(new).to_numpy()
    d = np.diff(f)
    if "increasing" in shape:
        assert d.min() >= -1e-7
    if "decreasing" in shape:
        assert d.max() <= 1e-7
    if "convex" in shape:
        assert np.diff(d).min() >= -1e-7
    if "concave" in shape:
        assert np.diff(d).max() <= 1e-7
    assert not np.allclose(f, f[0])           # a real effect, not a flat line


def _labels():
    rng = np.random.default_rng(4)
    x = rng.uniform(0, 10, 300)
    label = np.where(rng.uniform(size=300) < 1 / (1 + np.exp(-(x - 5))), "yes", "no")
    return pd.DataFrame({"x": x, "label": label})


@pytest.mark.xfail(strict=True, reason="known gap: the newton route's point for logistic + 8 increasing "
                                       "pieces certifies to a relative gap of 8e-7 only (the direct route: 9e-8)")
def test_classification_eight_pieces_on_the_default_route():
    assert lo.classification(_labels(), "label").shape("x", "increasing").solve().status == "optimal"


def test_classification_with_a_shape():
    df = _labels()
    fit = lo.classification(df, "label").shape("x", "increasing", pieces=4).solve()
    assert fit.status == "optimal"
    s = fit.decision(pd.DataFrame({"x": np.linspace(0, 10, 500)})).to_numpy()
    assert np.diff(s).min() >= -1e-7 and s[-1] > s[0]


def test_new_data_and_model_file_predict_alike(tmp_path):
    df = _frame()
    fit = lo.regression(df, "y").shape("distance_km", "increasing concave", pieces=5).solve()
    new = _frame(50, seed=9).drop(columns="y")
    new.loc[0, "distance_km"] = 14.0            # beyond the training range: the last piece extends
    fit.save(tmp_path / "m.json")
    saved = json.loads((tmp_path / "m.json").read_text())
    assert saved["task"]["encoding"]["shapes"]["distance_km"]["form"] == "lines"
    back = lo.load_fit(tmp_path / "m.json")
    assert back.status == "optimal"
    assert np.array_equal(back.predict(new).to_numpy(), fit.predict(new).to_numpy())
    b = fit.task.dataset.encoding.shapes["distance_km"]
    manual = b.columns(new["distance_km"]) @ fit.coef[list(b.names)].to_numpy() + fit.coef["z"] * new["z"] \
        + fit.intercept
    assert np.max(np.abs(manual - fit.predict(new).to_numpy())) < 1e-12
    table = back.shape_table("distance_km")
    assert table["knot"].sum() == len(b.knots) == 4
    assert np.allclose(table["effect"], fit.shape_table("distance_km")["effect"])


def test_names_and_rule_text():
    fit = lo.regression(_frame(), "y").shape("distance_km", "increasing", pieces=3)
    assert fit.features == ("distance_km.slope", "distance_km.turn1", "distance_km.turn2", "z")
    assert [r.text for r in fit.rules] == ["distance_km is increasing"]
    assert fit.requirements[0].rows == 3      # one slope per piece
    steps = lo.regression(_frame(), "y").shape("distance_km", "decreasing", form="steps", pieces=4)
    assert steps.features[:3] == ("distance_km.step1", "distance_km.step2", "distance_km.step3")


def _message(exc_info):
    return str(exc_info.value)


def test_errors_name_the_feature_and_the_fix():
    task = lo.regression(_frame().assign(region=lambda d: np.where(d.z > 0, "north", "south"),
                                         flat=1.0), "y")
    cases = [
        (lambda: task.shape("distance_km", "increasng"), ParameterError, ["increasng", "nearest known: increasing"]),
        (lambda: task.shape("distance_km", "increasing decreasing"), ParameterError, ["no effect", "distance_km"]),
        (lambda: task.shape("distance_km", "convex concave"), ParameterError, ["straight line", "unshaped"]),
        (lambda: task.shape("distance_km", "convex", form="steps"), ParameterError, ["form=\"lines\""]),
        (lambda: task.shape("distance_km", "convex", form="curves"), ParameterError,
         ["'distance_km'", "form", "'lines', 'steps'"]),
        (lambda: task.shape("distance_km", "convex", pieces=1), ParameterError,
         ["'distance_km'", "pieces", "at least 2"]),
        (lambda: task.shape("region", "increasing"), DataError, ["'region'", "not numeric", "astype(float)"]),
        (lambda: task.shape("flat", "increasing"), DataError, ["'flat'", "1 distinct", "drop it"]),
        (lambda: task.shape("distanse_km", "increasing"), DataError, ["distanse_km", "nearest known: distance_km"]),
        (lambda: task.require("z >= 0").shape("distance_km", "convex"), ParameterError, ["shape features first"]),
        (lambda: task.shape("distance_km", "convex").shape("distance_km", "increasing"), DataError,
         ["shaped already", "one call"]),
        (lambda: lo.regression(np.ones((5, 1)), np.arange(5.0)).shape("x0", "convex"), DataError, ["DataFrame"]),
    ]
    for call, kind, words in cases:
        with pytest.raises(kind) as got:
            call()
        assert isinstance(got.value, LearnoptError)
        for w in words:
            assert w in _message(got), (w, _message(got))
    fit = task.solve()
    with pytest.raises(DataError, match="not a shaped feature"):
        fit.shape_table("distance_km")


def test_two_shaped_features():
    df = _frame().assign(w=lambda d: d.z ** 2)
    fit = lo.regression(df, "y").shape("distance_km", "increasing", pieces=4).shape("w", "convex", pieces=3).solve()
    assert fit.status == "optimal"
    assert [r.text for r in fit.task.rules] == ["distance_km is increasing", "w is convex"]
    for r in fit.task.requirements:
        assert r.A.shape[1] == len(fit.task.coefficient_names)


def _shape_recipe(tmp_path, shapes: str):
    _frame(150, seed=5).to_csv(tmp_path / "rows.csv", index=False)
    path = tmp_path / "r.toml"
    path.write_text('[data]\npath = "rows.csv"\n\n[task]\nkind = "regression"\ntarget = "y"\nrules = ["z >= 0"]\n\n'
                    + shapes + '\n[[task.penalties]]\nname = "l2"\nstrength = 0.001\n\n'
                    '[outputs]\nfit = "out/fit.json"\nreport = "out/r.html"\n')
    return path


def test_a_recipe_with_shapes_runs(tmp_path):
    from learnopt.interface.jobs import run
    from learnopt.interface.recipes import read_recipe
    path = _shape_recipe(tmp_path, '[[task.shapes]]\nfeature = "distance_km"\nshape = "increasing concave"\n'
                                   'pieces = 5\n')
    job = run(read_recipe(path))
    assert job.fit.status == "optimal"
    twin = lo.regression(_frame(150, seed=5), "y").shape("distance_km", "increasing concave", pieces=5) \
        .penalize(lo.penalty.l2(0.001)).require("z >= 0").solve()
    assert np.allclose(job.fit.coef.to_numpy(), twin.coef.to_numpy(), atol=1e-6)
    back = lo.load_fit(tmp_path / "out" / "fit.json")
    new = _frame(20, seed=6)
    assert np.array_equal(back.predict(new).to_numpy(), job.fit.predict(new).to_numpy())
    page = (tmp_path / "out" / "r.html").read_text()
    assert "Shaped effect of distance_km" in page and "Imposed: <b>increasing and concave</b>" in page


@pytest.mark.parametrize("entry, words", [
    ('feature = "distance_km"\nshape = "increasng"\n', ["task.shapes", "nearest known: increasing"]),
    ('feature = "distance_km"\nshape = "convex"\nform = "curves"\n', ["form"]),
    ('feature = "nowhere"\nshape = "convex"\n', ["task.shapes[0]", "'nowhere'", "not a feature"]),
])
def test_recipe_shape_mistakes_are_named(tmp_path, entry, words):
    from learnopt.interface.jobs import run
    from learnopt.interface.recipes import read_recipe
    path = _shape_recipe(tmp_path, "[[task.shapes]]\n" + entry)
    with pytest.raises(LearnoptError) as got:
        run(read_recipe(path))
    for w in words:
        assert w in str(got.value), (w, str(got.value))
