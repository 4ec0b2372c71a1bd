"""Model files (JSON, schema-versioned, no pickle) and data round trips."""
import json

import numpy as np
import pandas as pd
import pytest
import scipy.sparse as sp

import learnopt as lo
from learnopt.interface.demo import make_data


@pytest.fixture(scope="module")
def demo_fit():
    df = make_data(300)
    task = (lo.regression(df, target="minutes", loss=lo.loss.huber(4.0),
                          features=["distance_km", "stops", "size", "region"])
            .penalize(lo.penalty.l1(0.01), lo.penalty.group(0.02, [["stops", "distance_km"]]))
            .require("distance_km >= 0", "increasing(size.small, size.medium, size.large)"))
    return df, task.solve()


def test_saved_fit_predicts_exactly_the_same(tmp_path, demo_fit):
    df, fit = demo_fit
    path = tmp_path / "fit.json"
    fit.save(path)
    back = lo.load_fit(path)
    new = df.sample(50, random_state=1)
    pd.testing.assert_series_equal(back.predict(new), fit.predict(new), check_exact=True)
    assert back.status == fit.status and back.gap == fit.gap and back.route == fit.route
    assert back.task.loss == fit.task.loss and back.task.penalties == fit.task.penalties
    assert [r.text for r in back.task.rules] == [r.text for r in fit.task.rules]
    saved = json.loads(path.read_text())
    assert saved["schema_version"] == 2 and saved["evidence"]["versions"]["cvxpy"]
    assert not list(tmp_path.glob(".learnopt-*"))          # the temporary file was renamed away
    assert back.evaluate(new)["mae"] == pytest.approx(fit.evaluate(new)["mae"], abs=0)


def test_classification_labels_survive(tmp_path):
    rng = np.random.default_rng(0)
    df = pd.DataFrame({"x": rng.normal(size=120), "z": rng.normal(size=120)})
    df["label"] = np.where(df.x - df.z > 0, 7, 3)
    fit = lo.classification(df, "label", loss="logistic").penalize(lo.penalty.l2(0.01)).solve()
    fit.save(tmp_path / "c.json")
    back = lo.load_fit(tmp_path / "c.json")
    assert back.predict(df).tolist() == fit.predict(df).tolist()
    assert set(back.predict(df)) <= {3, 7}
    np.testing.assert_array_equal(back.probability(df), fit.probability(df))


def test_model_file_errors(tmp_path, demo_fit):
    _, fit = demo_fit
    path = tmp_path / "f.json"
    fit.save(path)
    data = json.loads(path.read_text())
    data["schema_version"] = 99
    (tmp_path / "new.json").write_text(json.dumps(data))
    with pytest.raises(lo.DataError, match="schema 99.*Upgrade learnopt"):
        lo.load_fit(tmp_path / "new.json")
    (tmp_path / "other.json").write_text("{\"hello\": 1}")
    with pytest.raises(lo.DataError, match="not a learnopt model file"):
        lo.load_fit(tmp_path / "other.json")
    with pytest.raises(lo.DataError, match="does not exist"):
        lo.load_fit(tmp_path / "missing.json")
    import cvxpy as cp
    X, y = np.random.default_rng(0).normal(size=(30, 2)), np.arange(30.0)
    custom = lo.regression(X, y).penalize(lo.penalty.custom(lambda w: cp.sum_squares(w))).solve()
    with pytest.raises(lo.LearnoptError, match="cannot be written to a model file"):
        custom.save(tmp_path / "custom.json")
    assert not (tmp_path / "custom.json").exists()


def test_pandas_in_pandas_out_and_float32(demo_fit):
    df, fit = demo_fit
    part = df.iloc[10:20]
    pred = fit.predict(part)
    assert isinstance(pred, pd.Series) and list(pred.index) == list(part.index)
    X = np.random.default_rng(1).normal(size=(40, 3)).astype(np.float32)
    y = (X @ np.array([1.0, 2.0, -1.0], dtype=np.float32)).astype(np.float32)
    fit32 = lo.regression(X, y).penalize(lo.penalty.l1(0.001)).solve()
    fit64 = lo.regression(X.astype(np.float64), y.astype(np.float64)).penalize(lo.penalty.l1(0.001)).solve()
    assert fit32.objective == fit64.objective
    sparse = lo.regression(sp.csc_matrix(X), y).penalize(lo.penalty.l1(0.001)).solve()
    assert sparse.objective == pytest.approx(fit64.objective, rel=1e-9)
    assert isinstance(fit32.predict(X), np.ndarray)


@pytest.mark.parametrize("edit", [
    lambda d: d["coef"].__setitem__("stops", d["coef"]["stops"] + 0.5),          # a coefficient changed
    lambda d: d["evidence"].__setitem__("gap", 0.0),                              # evidence touched up
    lambda d: d.pop("digest"),                                                    # digest removed
])
def test_a_hand_edited_model_file_is_not_optimal(tmp_path, edit):
    # common practice (content digests): evidence covers the numbers it was computed for; a file
    # changed after it was written loads as unverified, and says why
    df = make_data(300)
    fit = (lo.regression(df, target="minutes", features=["distance_km", "stops", "size"])
           .penalize(lo.penalty.l1(0.01)).require("stops <= 3").solve())
    fit.save(tmp_path / "f.json")
    data = json.loads((tmp_path / "f.json").read_text())
    assert lo.load_fit(tmp_path / "f.json").status == "optimal"
    edit(data)
    (tmp_path / "f.json").write_text(json.dumps(data))
    back = lo.load_fit(tmp_path / "f.json")
    assert back.status == "unverified" and "digest" in back.message


@pytest.mark.parametrize("value", ["nan", 1e400, "inf"])
def test_non_finite_coefficients_are_refused(tmp_path, demo_fit, value):
    _, fit = demo_fit
    fit.save(tmp_path / "f.json")
    text = (tmp_path / "f.json").read_text()
    data = json.loads(text)
    data["coef"]["stops"] = "__X__"
    (tmp_path / "f.json").write_text(json.dumps(data).replace('"__X__"', "1e400" if value == 1e400 else f'"{value}"'))
    with pytest.raises(lo.DataError, match="stops is not a finite number"):
        lo.load_fit(tmp_path / "f.json")


@pytest.mark.parametrize("edit,fragments", [
    (lambda d: d["evidence"].pop("gap"), ["evidence.gap is missing"]),
    (lambda d: d.__setitem__("colour", "red"), ["colour is not a field of a model file"]),
    (lambda d: d["evidence"].__setitem__("objective", "low"), ["evidence.objective is 'low'; it has to be a number"]),
    (lambda d: d["task"].__setitem__("intercept", "yes"), ["task.intercept is 'yes'; it has to be true or false"]),
    (lambda d: d["coef"].pop("stops"), ["coef has to hold one number per feature; missing stops"]),
    (lambda d: (d["evidence"].pop("route"), d["task"].__setitem__("rules", [1])),
     ["2 problems", "evidence.route is missing", "task.rules has to be a list of rule texts"]),
    (lambda d: d.__setitem__("schema_version", 1.5), ["schema_version is 1.5; it has to be a positive whole number"]),
])
def test_a_model_file_of_the_wrong_shape_is_refused_naming_each_field(tmp_path, edit, fragments):
    # common practice (schema validation): every problem at once, each naming the field
    df = make_data(120)
    fit = lo.regression(df, target="minutes", features=["distance_km", "stops"]).solve()
    fit.save(tmp_path / "f.json")
    data = json.loads((tmp_path / "f.json").read_text())
    edit(data)
    (tmp_path / "f.json").write_text(json.dumps(data))
    with pytest.raises(lo.DataError) as caught:
        lo.load_fit(tmp_path / "f.json")
    text = str(caught.value) + " ".join(caught.value.problems)
    for f in fragments:
        assert f in text
