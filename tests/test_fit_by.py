"""task.fit_by: one certified fit per group, checked against independent per-group fits."""
import numpy as np
import pandas as pd
import pytest
from sklearn.linear_model import LinearRegression

import learnopt as lo
from learnopt.core.errors import LearnoptError

FEATURES = ["x0", "x1", "x2"]


def _stores(groups=6, rows=60, seed=0):
    # invented, seeded: each store has its own effects
    rng = np.random.default_rng(seed)
    parts = []
    for g in range(groups):
        X = rng.normal(size=(rows, 3))
        y = X @ rng.normal(size=3) + 2.0 * g + rng.normal(size=rows)
        part = pd.DataFrame(X, columns=FEATURES).assign(y=y, store=f"store {g}", tier=rng.choice(["a", "b"], rows))
        parts.append(part)
    return pd.concat(parts, ignore_index=True)


def test_each_group_equals_least_squares_on_its_rows():
    # Reference: scikit-learn LinearRegression fitted on each group's rows alone
    frame = _stores()
    fits = lo.regression(frame, "y", features=FEATURES).fit_by("store", jobs=1, progress=False)
    assert fits.certified == 6
    for store, part in frame.groupby("store"):
        ref = LinearRegression().fit(part[FEATURES], part["y"])
        row = fits.table.loc[store]
        assert np.allclose(row[FEATURES].to_numpy(dtype=float), ref.coef_, atol=1e-6)
        assert row["intercept"] == pytest.approx(ref.intercept_, abs=1e-6)
        assert row["rows"] == len(part)


def test_rules_are_applied_in_each_group_and_match_a_fit_on_that_group_alone():
    # the rule compiled on each group's rows: the same as building the task on those rows
    frame = _stores()
    rules = ["x0 >= 0.2", "prediction >= 0 where tier == 'a'"]
    task = lo.regression(frame, "y", features=FEATURES).require(*rules)
    fits = task.fit_by("store", jobs=1, progress=False)
    for store, part in frame.groupby("store"):
        alone = lo.regression(part, "y", features=FEATURES).require(*rules).solve()
        row = fits.table.loc[store]
        assert row["status"] == "optimal"
        assert row["objective"] == pytest.approx(alone.objective, rel=1e-7)
        assert np.allclose(row[list(task.coefficient_names)].to_numpy(dtype=float), alone.theta, atol=1e-5)
        assert row["x0"] >= 0.2 - 1e-7


def test_predict_sends_each_row_to_its_group():
    frame = _stores()
    fits = lo.regression(frame, "y", features=FEATURES).fit_by("store", jobs=1, progress=False)
    new = frame.sample(20, random_state=1)
    pred = fits.predict(new)
    coefs = fits.coefficients()
    by_hand = [float(r[FEATURES].to_numpy(dtype=float) @ coefs.loc[r["store"], FEATURES].to_numpy(dtype=float)
                     + coefs.loc[r["store"], "intercept"]) for _, r in new.iterrows()]
    assert np.allclose(pred.to_numpy(), by_hand)
    assert list(pred.index) == list(new.index)


def test_workers_give_the_same_table():
    frame = _stores(groups=8)
    task = lo.regression(frame, "y", features=FEATURES).require("x1 <= 0.5")
    one = task.fit_by("store", jobs=1, progress=False)
    two = task.fit_by("store", jobs=2, progress=False)
    cols = list(task.coefficient_names)
    assert np.allclose(one.table[cols].to_numpy(dtype=float), two.table[cols].to_numpy(dtype=float), atol=1e-9)


def test_a_rule_without_rows_in_a_group_is_left_out_and_named():
    frame = _stores()
    frame.loc[frame["store"] == "store 0", "tier"] = "b"          # store 0 has no tier-a rows
    fits = lo.regression(frame, "y", features=FEATURES).require("prediction >= 0 where tier == 'a'") \
        .fit_by("store", jobs=1, progress=False)
    assert fits.table.loc["store 0", "rules_left_out"] == "prediction >= 0 where tier == 'a'"
    assert fits.table.loc["store 1", "rules_left_out"] == ""
    assert fits.certified == 6


@pytest.mark.parametrize("call, words", [
    (lambda t: t.fit_by("stor"), "nearest known: store"),
    (lambda t: t.fit_by("store", jobs=0), "jobs"),
])
def test_mistakes_are_named(call, words):
    task = lo.regression(_stores(), "y", features=FEATURES)
    with pytest.raises(LearnoptError) as err:
        call(task)
    assert words in str(err.value)


def test_a_feature_as_group_column_is_refused():
    frame = _stores()
    with pytest.raises(LearnoptError, match="features="):
        lo.regression(frame, "y", features=FEATURES + ["store"]).fit_by("store")


def test_unknown_groups_in_new_rows_are_named():
    frame = _stores()
    fits = lo.regression(frame, "y", features=FEATURES).fit_by("store", jobs=1, progress=False)
    with pytest.raises(LearnoptError, match="store 99"):
        fits.predict(frame.head(2).assign(store="store 99"))


def test_a_recipe_fits_by_group_and_writes_the_table(tmp_path):
    # the recipe action by_group: the same table as task.fit_by in Python
    import json
    import shutil
    from pathlib import Path
    from click.testing import CliRunner
    from learnopt.interface.cli import main
    recipes = Path(__file__).resolve().parent.parent / "recipes"
    shutil.copytree(recipes / "data", tmp_path / "data")
    src = (recipes / "deliveries.toml").read_text()
    src = src.replace('action = "solve"', 'action = "by_group"\nby = "segment"')
    src = src.replace("[outputs]", "[outputs]\ngroups = \"out/by-segment.csv\"")
    src = src.replace("\"prediction >= service_floor where segment == 'retail'\",", "")
    (tmp_path / "r.toml").write_text(src)
    out = CliRunner().invoke(main, ["run", str(tmp_path / "r.toml"), "--json"])
    assert out.exit_code == 0, out.output
    data = json.loads(out.output)["by_group"]
    table = pd.read_csv(tmp_path / "out" / "by-segment.csv", index_col="segment")
    assert data["groups"] == len(table) >= 2 and data["certified"] == len(table)
    from learnopt.interface.jobs import training_task
    from learnopt.interface.recipes import read_recipe
    task, _ = training_task(read_recipe(tmp_path / "r.toml"))      # the training rows (a holdout is set aside)
    direct = task.fit_by("segment", jobs=1, progress=False).table
    assert np.allclose(table["objective"].to_numpy(), direct["objective"].to_numpy(), rtol=1e-7)
    assert "One fit per segment" in (tmp_path / "out" / "deliveries-report.html").read_text()


def test_recipe_by_needs_the_action():
    from learnopt.interface.recipes import recipe_from
    raw = {"data": {"path": "d.csv"}, "task": {"kind": "regression", "target": "y"}, "do": {"by": "store"}}
    with pytest.raises(LearnoptError, match="do.by"):
        recipe_from(raw)


def test_groups_of_one_shape_share_one_compiled_problem_and_agree_with_fits_alone():
    # squared loss, an l1 penalty and a rule on coefficients: every group has the same shape, so
    # one problem is compiled and re-solved; each answer equals the group's own fit (independent build)
    from learnopt.solve import by_group
    frame = _stores(groups=5)
    task = lo.regression(frame, "y", features=FEATURES).penalize(lo.penalty.l1(0.05)).require("x0 >= 0.3", "x1 + x2 <= 1")
    by_group.COMPILED.clear()
    fits = task.fit_by("store", jobs=1, progress=False)
    assert len(by_group.COMPILED) == 1
    for store, part in frame.groupby("store"):
        alone = lo.regression(part, "y", features=FEATURES).penalize(lo.penalty.l1(0.05)) \
            .require("x0 >= 0.3", "x1 + x2 <= 1").solve()
        row = fits.table.loc[store]
        assert row["status"] == "optimal"
        assert row["objective"] == pytest.approx(alone.objective, rel=1e-7)
        assert np.allclose(row[list(task.coefficient_names)].to_numpy(dtype=float), alone.theta, atol=1e-5)
