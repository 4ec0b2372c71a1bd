"""fit.evaluate on new rows: the task's rules measured there, and metrics compared across groups."""
import json

import numpy as np
import pandas as pd
import pytest

import learnopt as lo
from learnopt.core.errors import DataError, LearnoptError


# ----------------------------------------------------------------------------- groups: classification

def _sign_classifier():
    """A classifier whose prediction is the sign of x: trained on separable rows, no intercept,
    so the score is w * x with w > 0 and the prediction on a new row is 'yes' exactly when x > 0."""
    train = pd.DataFrame({"x": [-2.0, -1.0, -0.5, 0.5, 1.0, 2.0], "label": ["no", "no", "no", "yes", "yes", "yes"]})
    fit = lo.classification(train, target="label", loss="logistic", positive="yes", intercept=False).solve()
    assert fit.coef["x"] > 0
    return fit


# 12 rows, 2 groups; predicted = sign of x ('+' = yes), true = label.
#   group a: predicted + + + - - - ; true + + - + - -
#   group b: predicted + - - + - - ; true + + + - - -
_A = ([1, 1, 1, -1, -1, -1], ["yes", "yes", "no", "yes", "no", "no"])
_B = ([1, -1, -1, 1, -1, -1], ["yes", "yes", "yes", "no", "no", "no"])


def _rows(*groups):
    parts = [pd.DataFrame({"x": np.array(x, float), "label": t, "g": name}) for name, (x, t) in groups]
    return pd.concat(parts, ignore_index=True)


def test_group_rates_and_gaps_match_a_table_computed_by_hand():
    # Demographic parity and equalised odds as defined in Hardt, Price and Srebro 2016, sec. 2-3
    # (and Zafar et al. 2017); checked on this 12-row table computed by hand:
    #   a: positive rate 3/6 = 1/2; true positives: rows 1, 2, 4 -> predicted +, +, - -> TPR 2/3;
    #      true negatives: rows 3, 5, 6 -> predicted +, -, - -> FPR 1/3; right on rows 1, 2, 5, 6 -> 4/6.
    #   b: positive rate 2/6 = 1/3; true positives rows 1-3 -> +, -, - -> TPR 1/3;
    #      true negatives rows 4-6 -> +, -, - -> FPR 1/3; right on rows 1, 5, 6 -> 3/6.
    #   demographic parity gap = 1/2 - 1/3 = 1/6; TPR gap 2/3 - 1/3 = 1/3; FPR gap 0;
    #   equalised odds gap = max(1/3, 0) = 1/3.
    fit = _sign_classifier()
    new = _rows(("a", _A), ("b", _B))
    ev = fit.evaluate(new, groups="g")
    want = pd.DataFrame({"n": [6, 6], "positive_rate": [1 / 2, 1 / 3], "true_positive_rate": [2 / 3, 1 / 3],
                         "false_positive_rate": [1 / 3, 1 / 3], "accuracy": [4 / 6, 3 / 6]},
                        index=pd.Index(["a", "b"], name="group"))
    pd.testing.assert_frame_equal(ev.groups, want, check_dtype=False)
    assert ev.gaps["demographic_parity_gap"] == pytest.approx(1 / 6)
    assert ev.gaps["true_positive_rate"] == pytest.approx(1 / 3)
    assert ev.gaps["false_positive_rate"] == pytest.approx(0.0)
    assert ev.gaps["equalised_odds_gap"] == pytest.approx(1 / 3)
    assert ev.gaps["accuracy"] == pytest.approx(1 / 6)
    # the same labels given row by row instead of as a column name
    again = fit.evaluate(new.drop(columns="g"), groups=new["g"].to_numpy())
    pd.testing.assert_frame_equal(again.groups, ev.groups)


def test_a_group_without_positive_labels_has_no_true_positive_rate_and_is_left_out_of_the_gap():
    # Hardt et al. 2016 define the TPR conditional on a positive true label: undefined for a group
    # with none. By hand, adding group c (true - -, predicted + -): TPR NaN, FPR 1/2, positive rate 1/2.
    #   TPR gap over a, b only = 1/3; FPR gap = 1/2 - 1/3 = 1/6; equalised odds = 1/3;
    #   demographic parity gap = 1/2 - 1/3 = 1/6.
    fit = _sign_classifier()
    new = _rows(("a", _A), ("b", _B), ("c", ([1, -1], ["no", "no"])))
    ev = fit.evaluate(new, groups="g")
    assert np.isnan(ev.groups.loc["c", "true_positive_rate"])
    assert ev.groups.loc["c", "false_positive_rate"] == pytest.approx(0.5)
    assert ev.gaps["true_positive_rate"] == pytest.approx(1 / 3)
    assert ev.gaps["false_positive_rate"] == pytest.approx(1 / 6)
    assert ev.gaps["equalised_odds_gap"] == pytest.approx(1 / 3)
    assert ev.gaps["demographic_parity_gap"] == pytest.approx(1 / 6)
    assert any("'c'" in note and "true-positive rate" in note for note in ev.notes)
    assert "notes:" in repr(ev)


# ----------------------------------------------------------------------------- groups: regression

def test_regression_metrics_per_group_match_a_pandas_groupby():
    # reference: the metrics recomputed independently with pandas groupby on fit.predict
    rng = np.random.default_rng(3)
    n = 90
    df = pd.DataFrame({"x": rng.normal(size=n), "z": rng.normal(size=n), "region": rng.choice(["n", "s", "w"], n)})
    df["y"] = 1.0 + 2.0 * df.x - df.z + rng.normal(scale=0.5, size=n) + np.where(df.region == "s", 1.0, 0.0)
    train, new = df.iloc[:60], df.iloc[60:]
    fit = lo.regression(train, target="y", features=["x", "z"]).solve()
    ev = fit.evaluate(new, groups="region")
    frame = pd.DataFrame({"p": fit.predict(new), "y": new["y"], "g": new["region"]})
    frame["r"] = frame.p - frame.y
    by = frame.groupby("g")
    want = pd.DataFrame({"n": by.size(), "mse": by.r.apply(lambda r: (r ** 2).mean()),
                         "mae": by.r.apply(lambda r: r.abs().mean()), "mean_prediction": by.p.mean(),
                         "mean_target": by.y.mean()})
    for column in want:
        np.testing.assert_allclose(ev.groups[column].to_numpy(float), want[column].to_numpy(float), rtol=1e-12)
    np.testing.assert_allclose(ev.groups["rmse"], np.sqrt(want["mse"]), rtol=1e-12)
    for column in ("mse", "mae", "mean_prediction", "mean_target"):
        assert ev.gaps[column] == pytest.approx(want[column].max() - want[column].min(), rel=1e-12)
    assert ev["n"] == len(new)        # the overall metrics are still there


# ----------------------------------------------------------------------------- rules on new rows

def _line_fit(rules=("prediction >= 0",)):
    """y = 1 + x exactly on x in [0, 2]: the fit is intercept 1, slope 1, and the rules hold there."""
    x = np.linspace(0.0, 2.0, 9)
    train = pd.DataFrame({"x": x, "y": 1.0 + x, "cost": 5.0, "region": ["north", "south", "east"] * 3})
    fit = lo.regression(train, target="y", features=["x"]).require(*rules).solve()
    assert fit.status == "optimal"
    return fit


def test_rows_breaking_a_rule_are_counted_and_measured_as_worked_by_hand():
    # By hand: predictions 1 + x at x = -3, -2, -0.5, 0.5, 1 are -2, -1, 0.5, 1.5, 2; the rule
    # prediction >= 0 selects all 5 rows; 2 break it, by 2 and 1: worst 2, mean 1.5.
    # "prediction <= 2 * cost where region == 'north'" with cost 1: selects rows 1 and 4 (north);
    # predictions there -2 and 1.5 against 2; row 4 holds, row 1 holds: 0 broken; with cost 0.5
    # on row 4 the limit is 1 and row 4 breaks by 0.5.
    # "x >= 0" names coefficients only; "... where region == 'east'" selects none of the new rows.
    rules = ("prediction >= 0", "prediction <= 2 * cost where region == 'north'", "x >= 0",
             "prediction <= 10 where region == 'east'")
    fit = _line_fit(rules)
    new = pd.DataFrame({"x": [-3.0, -2.0, -0.5, 0.5, 1.0], "y": 0.0, "cost": [1.0, 1.0, 1.0, 0.5, 1.0],
                        "region": ["north", "south", "south", "north", "west"]})
    table = fit.evaluate(new).rules
    assert list(table.index) == list(rules)
    first = table.loc["prediction >= 0"]
    assert (first["kind"], first["rows"], first["broken"]) == ("row by row", 5, 2)
    assert first["share_broken"] == pytest.approx(2 / 5)
    assert first["worst"] == pytest.approx(2.0, rel=1e-5)
    assert first["mean_break"] == pytest.approx(1.5, rel=1e-5)
    north = table.loc["prediction <= 2 * cost where region == 'north'"]
    assert (north["rows"], north["broken"]) == (2, 1)
    assert north["worst"] == pytest.approx(0.5, rel=1e-5)
    assert table.loc["x >= 0", "kind"] == "coefficients only"
    east = table.loc["prediction <= 10 where region == 'east'"]
    assert (east["rows"], east["broken"]) == (0, 0) and "none of the new rows" in east["note"]


def test_a_where_that_selects_a_single_new_row_is_still_a_rule_row_by_row():
    # one selected row gives a one-row requirement, like a rule over rows; the kind must not
    # depend on how many rows happen to be selected. By hand: x = -3 -> prediction -2, breaks by 2.
    fit = _line_fit(("prediction >= 0 where region == 'north'",))
    new = pd.DataFrame({"x": [-3.0, 1.0], "y": 0.0, "cost": 1.0, "region": ["north", "south"]})
    row = fit.evaluate(new).rules.iloc[0]
    assert (row["kind"], row["rows"], row["broken"]) == ("row by row", 1, 1)
    assert row["worst"] == pytest.approx(2.0, rel=1e-5)


def test_a_parity_rule_shows_the_held_out_gap_between_the_groups():
    # reference: the gap recomputed directly from fit.predict with pandas on the held-out rows
    rng = np.random.default_rng(11)
    n = 160
    df = pd.DataFrame({"x": rng.normal(size=n), "g": rng.choice(["a", "b"], n)})
    df["y"] = 2.0 * df.x + np.where(df.g == "b", 1.5, 0.0) + rng.normal(scale=0.3, size=n)
    train, held = df.iloc[:100], df.iloc[100:]
    rule = "mean(prediction where g == 'a') == mean(prediction where g == 'b')"
    fit = lo.regression(train, target="y", features=["x", "g"]).require(rule).solve()
    on_train = fit.predict(train).groupby(train["g"]).mean()
    assert on_train["a"] == pytest.approx(on_train["b"], abs=1e-5)       # holds where it was imposed
    ev = fit.evaluate(held, groups="g")
    on_held = fit.predict(held).groupby(held["g"]).mean()
    gap = on_held["a"] - on_held["b"]
    assert abs(gap) > 1e-3                                                # not trivially 0 on new rows
    row = ev.rules.loc[rule]
    assert row["kind"] == "over rows"
    assert row["difference"] == pytest.approx(gap, rel=1e-9)
    assert row["worst"] == pytest.approx(abs(gap), rel=1e-9)
    assert ev.gaps["mean_prediction"] == pytest.approx(abs(gap), rel=1e-9)


def test_rules_on_predictions_are_checked_on_array_data_and_a_where_is_explained():
    # By hand: y = 1 + x exactly, so predictions at x = -2, 3 are -1 and 4: one row breaks by 1.
    X = np.linspace(0.0, 2.0, 9)[:, None]
    fit = lo.regression(X, target=1.0 + X[:, 0]).require("prediction >= 0").solve()
    row = fit.evaluate(np.array([[-2.0], [3.0]]), target=[0.0, 0.0]).rules.iloc[0]
    assert (row["rows"], row["broken"]) == (2, 1) and row["worst"] == pytest.approx(1.0, rel=1e-5)


def test_the_evaluation_prints_and_turns_into_json_with_its_new_parts():
    # property: everything in to_dict survives json.dumps, and the parts are those on the object
    fit = _line_fit()
    new = pd.DataFrame({"x": [-3.0, 1.0, 2.0], "y": [0.0, 2.0, 3.0], "cost": 1.0, "region": ["a", "b", "b"]})
    ev = fit.evaluate(new, groups="region")
    plain = json.loads(json.dumps(ev.to_dict()))
    assert plain["rules"]["prediction >= 0"]["broken"] == int(ev.rules.loc["prediction >= 0", "broken"]) == 1
    assert set(plain["groups"]) == {"a", "b"} and plain["groups"]["a"]["n"] == 1
    assert plain["gaps"]["mse"] == pytest.approx(ev.gaps["mse"])
    assert plain["metrics"]["n"] == 3
    text = repr(ev)
    assert "rules on the new rows" in text and "by group" in text and "largest gap" in text


# ----------------------------------------------------------------------------- mistakes

def test_groups_naming_a_missing_column_names_it_and_the_nearest(reliability):
    fit = _line_fit()
    new = pd.DataFrame({"x": [1.0], "y": [2.0], "region": ["a"]})
    with pytest.raises(DataError) as info:
        fit.evaluate(new, groups="regin")
    reliability.record("evaluate", type(info.value).__name__)
    assert "evaluate(groups='regin'): no column 'regin'" in str(info.value)
    assert "(nearest known: region)" in str(info.value)


@pytest.mark.parametrize("groups, fragment", [(["a", "b"], "2 labels for 3 rows"),
                                              (["a", None, "b"], "1 of the 3 rows have no group label")])
def test_group_labels_of_the_wrong_length_or_missing_are_refused(groups, fragment):
    fit = _line_fit()
    new = pd.DataFrame({"x": [1.0, 2.0, 0.0], "y": [2.0, 3.0, 1.0]})
    with pytest.raises(DataError, match=fragment):
        fit.evaluate(new, groups=groups)


def test_a_group_column_name_on_array_data_asks_for_labels():
    X = np.linspace(0.0, 2.0, 9)[:, None]
    fit = lo.regression(X, target=1.0 + X[:, 0]).solve()
    with pytest.raises(LearnoptError, match="one group label per row"):
        fit.evaluate(X, target=1.0 + X[:, 0], groups="region")


def test_groups_on_sharded_data_are_refused_with_what_to_do():
    dd = pytest.importorskip("dask.dataframe")
    fit = _line_fit()
    new = dd.from_pandas(pd.DataFrame({"x": [1.0, 2.0], "y": [2.0, 3.0], "region": ["a", "b"]}), npartitions=1)
    with pytest.raises(DataError, match=r"evaluate\(groups='region'\).*sharded.*compute\(\)"):
        fit.evaluate(new, groups="region")


# ----------------------------------------------------------------------------- recipes

def test_a_recipe_with_held_out_groups_writes_rules_and_groups_to_json_and_the_report(tmp_path):
    # property: the command line's JSON carries the same rule table and group gaps as Python's
    # evaluate on the same held-out rows (the recipe's seeded split, recomputed here)
    import shutil
    from click.testing import CliRunner
    from learnopt.interface.cli import main
    from learnopt.interface.jobs import run
    from learnopt.interface.recipes import read_recipe

    recipes = tmp_path / "recipes"
    shutil.copytree(__import__("pathlib").Path(__file__).parent.parent / "recipes", recipes,
                    ignore=shutil.ignore_patterns("out"))
    path = recipes / "deliveries.toml"
    text = path.read_text().replace('holdout = { fraction = 0.2, seed = 7 }',
                                    'holdout = { fraction = 0.2, seed = 7, groups = "region" }')
    path.write_text(text)
    out = CliRunner().invoke(main, ["run", str(path), "--json", "--report", str(tmp_path / "r.html")])
    assert out.exit_code == 0, out.output
    data = json.loads(out.output)["evaluation"]
    parity = "mean(prediction where region == 'south') - mean(prediction where region == 'north') <= 1"
    assert data["rules"][parity]["kind"] == "over rows"
    assert set(data["groups"]) == {"north", "south"}
    job = run(read_recipe(str(path)))
    assert data["gaps"]["mean_prediction"] == pytest.approx(job.evaluation.gaps["mean_prediction"], rel=1e-9)
    # the rule's difference is (south - north mean prediction) - 1 on the held-out rows
    means = job.evaluation.groups["mean_prediction"]
    assert data["rules"][parity]["difference"] == pytest.approx(means["south"] - means["north"] - 1, rel=1e-6)
    page = (tmp_path / "r.html").read_text()
    assert "Rules on the held-out rows" in page and "Largest gap between groups" in page
    assert "Held-out means by group" in page          # the picture of the groups side by side
