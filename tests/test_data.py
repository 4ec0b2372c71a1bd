"""The data gateway: every bad input is a LearnoptError naming the column and the fix."""
import numpy as np
import pandas as pd
import pytest
import scipy.sparse as sp

import learnopt as lo


@pytest.fixture
def df():
    rng = np.random.default_rng(0)
    return pd.DataFrame({"x": rng.normal(size=30), "z": rng.normal(size=30), "y": rng.normal(size=30),
                         "w": np.ones(30), "label": rng.choice(["a", "b"], 30)})


@pytest.mark.parametrize("mutate,fragment", [
    (lambda d: d.assign(x=np.r_[np.nan, d.x[1:]]), "'x' has 1 missing"),
    (lambda d: d.assign(y=np.r_[np.inf, d.y[1:]]), "target 'y' has 1 missing"),
    (lambda d: d.iloc[:0], "no rows"),
    (lambda d: d.assign(y=d.label), "must be numeric"),
    (lambda d: d.assign(x=pd.to_datetime("2024-01-01")), "dates"),
])
def test_bad_frames(df, mutate, fragment):
    with pytest.raises(lo.DataError, match=fragment):
        lo.regression(mutate(df), target="y", features=["x", "z"])


def test_missing_columns_suggest(df):
    with pytest.raises(lo.DataError, match="nearest known: y"):
        lo.regression(df, target="yy")
    with pytest.raises(lo.DataError, match=r"\['q'\]"):
        lo.regression(df, target="y", features=["x", "q"])


def test_negative_and_zero_weights(df):
    with pytest.raises(lo.DataError, match="negative"):
        lo.regression(df, target="y", features=["x"], weights=-df.w)
    with pytest.raises(lo.DataError, match="sums to zero"):
        lo.regression(df, target="y", features=["x"], weights=0 * df.w)


def test_labels(df):
    with pytest.raises(lo.ParameterError, match="3 labels .*loss='logistic'.*is_0=data..label.. == 0"):
        lo.classification(df.assign(label=np.arange(30) % 3), target="label", features=["x"], loss="squared_hinge")
    with pytest.raises(lo.DataError, match="positive='c'"):
        lo.classification(df, target="label", features=["x"], positive="c")
    t = lo.classification(df, target="label", features=["x"])
    assert t.dataset.labels == ("a", "b")


@pytest.mark.parametrize("make,fragment", [
    (lambda: lo.loss.quantile(1.5), "quantile(tau=1.5): tau has to be between 0 and 1"),
    (lambda: lo.loss.huber(-1.0), "huber(delta=-1.0): delta has to be above 0"),
    (lambda: lo.loss.huber("1"), "huber(delta='1'): delta has to be a number above 0"),
    (lambda: lo.loss.huber(float("nan")), "huber(delta=nan): delta has to be a finite number above 0"),
    (lambda: lo.penalty.l1(-0.1), "l1(strength=-0.1): strength has to be at least 0"),
    (lambda: lo.penalty.elastic_net(0.1, 2.0), "elastic_net(mix=2.0): mix has to be between 0 and 1, both included"),
])
def test_parameters_checked_with_one_template(make, fragment):
    with pytest.raises(lo.ParameterError) as info:
        make()
    assert fragment in str(info.value)


def test_wrong_loss_for_kind(df):
    with pytest.raises(lo.ParameterError, match="not a regression loss"):
        lo.regression(df, target="y", loss="hinge")
    with pytest.raises(lo.ParameterError, match="Unknown loss 'hubber'"):
        lo.regression(df, target="y", loss="hubber")


def test_zero_one_loss_is_refused_with_surrogates(df):
    with pytest.raises(lo.NotConvexError, match="hinge.*logistic"):
        lo.classification(df, target="label", loss=lo.loss.zero_one())


def test_arrays_and_sparse_give_the_same_fit():
    rng = np.random.default_rng(1)
    X = rng.normal(size=(50, 3))
    X[X < 0.3] = 0.0
    y = X @ [1.0, 2.0, -1.0] + rng.normal(size=50)
    dense = lo.regression(X, y).penalize(lo.penalty.l1(0.05)).solve()
    sparse = lo.regression(sp.csr_matrix(X), y).penalize(lo.penalty.l1(0.05)).solve()
    assert list(dense.coef.index) == ["x0", "x1", "x2"]
    np.testing.assert_allclose(dense.coef, sparse.coef, atol=1e-7)


def test_prediction_needs_same_columns_and_levels(df):
    fit = lo.regression(df, target="y", features=["x", "label"]).solve()
    with pytest.raises(lo.DataError, match="lacks the feature column"):
        fit.predict(df[["x"]])
    with pytest.raises(lo.DataError, match="levels"):
        fit.predict(df.assign(label="c"))
    assert fit.predict(df).shape == (30,)


_BASE = pd.DataFrame({"a": [1.0, 2.0, 3.0, 4.0, 5.0], "b": [0.5, 0.1, 0.9, 0.3, 0.2], "y": [1.0, 2.1, 2.9, 4.2, 5.1]})


@pytest.mark.parametrize("mutate,fragment", [
    (lambda d: d.assign(a=[1, np.nan, 3, 4, 5]), "Column 'a' has 1 missing or infinite"),
    (lambda d: d.assign(a=[1, np.inf, 3, 4, 5]), "Column 'a' has 1 missing or infinite"),
    (lambda d: d.iloc[:0], "no rows"),
    (lambda d: d.assign(b=[1, "x", 2.0, None, 3]), "Column 'b' has 1 missing"),
    (lambda d: d.assign(b=pd.date_range("2020-01-01", periods=5)), "holds dates/times"),
    (lambda d: d.assign(a=[1e300, 2e300, 3e300, 4e300, 5e300]), "beyond 1e150"),
    (lambda d: d.assign(y=[1, 2, np.nan, 4, 5]), "The target 'y' has 1 missing"),
], ids=["nan", "inf", "empty", "mixed", "datetime", "huge", "target-nan"])
def test_gateway_battery_names_the_column_and_the_fix(mutate, fragment, reliability):
    # each bad input ends in a DataError naming the column and what to do (common practice)
    with pytest.raises(lo.DataError, match=fragment):
        lo.regression(mutate(_BASE), "y").solve()
    reliability.record("bad input", "DataError")


def test_gateway_battery_automatic_handling():
    # documented automatic handling: constant columns and tiny weights are kept (with a note)
    const = lo.regression(_BASE.assign(b=1.0), "y")
    assert any("constant column(s) ['b']" in n for n in const.dataset.notes)
    assert const.solve().status == "optimal"
    assert lo.regression(_BASE.assign(b=[True, False, True, True, False]), "y").solve().status == "optimal"
    assert lo.regression(_BASE, "y", weights=np.full(5, 1e-300)).solve().status == "optimal"
    with pytest.raises(lo.DataError, match="sums to zero"):
        lo.regression(_BASE, "y", weights=np.zeros(5))
    with pytest.raises(lo.ParameterError, match="3 labels"):
        lo.classification(_BASE.assign(y=[1, 2, 3, 1, 2]), "y", loss="squared_hinge")
    assert type(lo.classification(_BASE.assign(y=[1, 2, 3, 1, 2]), "y")).__name__ == "ClassesTask"


def test_check_names_identifier_and_proportional_columns_and_solve_says_it_interpolates():
    # common practice: an identifier column (one level per row) lets a fit reproduce every row;
    # a column that is a multiple of another cannot have its own coefficient
    rng = np.random.default_rng(0)
    df = pd.DataFrame({"x": rng.normal(size=200), "id": [f"r{i}" for i in range(200)], "y": rng.normal(size=200)})
    task = lo.regression(df, "y")
    notes = " ".join(task.check().data)
    assert "'id' has 200 distinct values in 200 rows" in notes
    fit = task.solve()
    assert "reproduces every training row exactly" in fit.message
    df2 = pd.DataFrame({"a": rng.normal(size=50)})
    df2["b"] = 2 * df2["a"] + 1
    df2["y"] = df2["a"] + rng.normal(size=50)
    notes2 = " ".join(lo.regression(df2, "y").check().data)
    assert "'a' and 'b' are proportional (b = " in notes2
    plain = lo.regression(df2.drop(columns="b"), "y")
    assert "proportional" not in " ".join(plain.check().data)
    assert "reproduces" not in plain.solve().message
