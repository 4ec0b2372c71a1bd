"""Rules on predictions over a box of feature values (lo.rule.over): exact through the corners.

Sources named beside the checks: the fact that a linear function's minimum over a box is taken at
a vertex (linear programming), cross-checked with scipy.optimize.linprog (HiGHS); an independent
formulation (the separable form min over [lo, hi] of x w = min(lo w, hi w)) written by hand in
cvxpy and solved by Clarabel. Data are invented with seeded numpy.
"""
import json

import cvxpy as cp
import numpy as np
import pandas as pd
import pytest
from scipy.optimize import linprog

import learnopt as lo

BOX = {"distance_km": (0.0, 50.0), "stops": (0.0, 4.0)}
LEVELS = ("east", "north", "south")          # east (first in sorted order) is the reference level


def deliveries(n=300, seed=0, slope=-0.2):
    """Invented data: with slope -0.2 the unconstrained fit goes far below 0 at distance 50."""
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({"distance_km": rng.uniform(0, 30, n), "stops": rng.integers(0, 5, n).astype(float),
                          "region": rng.choice(LEVELS, n)})
    frame["margin"] = (3 + slope * frame.distance_km + 0.5 * frame.stops + 1.0 * (frame.region == "north")
                       - 0.5 * (frame.region == "south") + rng.normal(0, 1, n))
    return frame


def level_shift(fit, level):
    return 0.0 if level == "east" else float(fit.coef[f"region.{level}"])


def box_minimum(fit, level, sign=1.0):
    """sign * (smallest prediction over the box at one level), by scipy's LP solver (HiGHS)."""
    w = np.array([fit.coef["distance_km"], fit.coef["stops"]])
    res = linprog(sign * w, bounds=[BOX["distance_km"], BOX["stops"]], method="highs")
    assert res.status == 0
    return res.fun + sign * (fit.intercept + level_shift(fit, level))


def test_the_rule_binds_and_holds_at_every_point_of_the_box():
    frame = deliveries()
    free = lo.regression(frame, target="margin").solve()
    # the case binds: without the rule, the smallest prediction over the box is below 0 (LP, HiGHS)
    assert min(box_minimum(free, level) for level in LEVELS) < -1.0
    rule = lo.rule.over("prediction >= 0", **BOX, region="every")
    fit = lo.regression(frame, target="margin").require(rule).solve()
    assert fit.status == "optimal"
    # LP fact: the minimum of a linear function over a box is at a vertex; scipy linprog (HiGHS)
    for level in LEVELS:
        assert box_minimum(fit, level) >= -1e-7
    # random points inside the box, every level
    rng = np.random.default_rng(1)
    pts = pd.DataFrame({"distance_km": rng.uniform(0, 50, 20000), "stops": rng.uniform(0, 4, 20000),
                        "region": rng.choice(LEVELS, 20000)})
    assert fit.predict(pts).min() >= -1e-7
    assert bool(fit.binding[rule.text]) and fit.prices[rule.text] > 0
    assert fit.objective > free.objective        # the rule costs loss when it binds


def test_same_fit_as_the_separable_form_written_by_hand():
    frame = deliveries(seed=2)
    rule = lo.rule.over("prediction >= 0", **BOX, region="every")
    fit = lo.regression(frame, target="margin").require(rule).solve()
    # independent formulation: min over [lo, hi] of x w = min(lo w, hi w), auxiliary t_j (Clarabel)
    X = np.column_stack([frame.distance_km, frame.stops, frame.region == "north", frame.region == "south"]).astype(float)
    y = frame.margin.to_numpy()
    w, b, t = cp.Variable(4), cp.Variable(), cp.Variable(2)
    lows, highs = np.array([0.0, 0.0]), np.array([50.0, 4.0])
    cons = [t <= cp.multiply(lows, w[:2]), t <= cp.multiply(highs, w[:2])]
    cons += [b + cp.sum(t) + shift >= 0 for shift in (0, w[2], w[3])]          # east, north, south
    prob = cp.Problem(cp.Minimize(cp.sum_squares(X @ w + b - y) / len(y)), cons)
    prob.solve(solver="CLARABEL")
    assert prob.status == "optimal"
    assert fit.objective == pytest.approx(prob.value, abs=1e-6)
    np.testing.assert_allclose(fit.coef.to_numpy(), w.value, atol=1e-6)
    assert fit.intercept == pytest.approx(float(b.value), abs=1e-6)


def test_a_rule_with_room_leaves_the_fit_alone():
    frame = deliveries(seed=3, slope=0.05)       # every prediction over the box is well above 0
    free = lo.regression(frame, target="margin").solve()
    assert min(box_minimum(free, level) for level in LEVELS) > 0.5
    rule = lo.rule.over("prediction >= 0", **BOX, region="every")
    fit = lo.regression(frame, target="margin").require(rule).solve()
    assert fit.status == "optimal" and fit.prices[rule.text] == 0 and not bool(fit.binding[rule.text])
    np.testing.assert_allclose(fit.coef.to_numpy(), free.coef.to_numpy(), atol=1e-6)


def test_both_sides_of_a_chained_rule_hold_over_the_box():
    frame = deliveries(seed=4)
    frame["margin"] = frame.margin + 2 * frame.distance_km        # large at distance 50: above 60
    rule = lo.rule.over("0 <= prediction <= 60", **BOX, region="every")
    fit = lo.regression(frame, target="margin").require(rule).solve()
    assert fit.status == "optimal"
    for level in LEVELS:                         # largest and smallest over the box, scipy linprog (HiGHS)
        assert box_minimum(fit, level) >= -1e-7
        assert -box_minimum(fit, level, sign=-1.0) <= 60 + 1e-7
    assert len(fit.task.requirements) == 2 and all(r.rows == 4 * 3 for r in fit.task.requirements)


def test_corners_fixed_values_and_chosen_levels_by_hand():
    task = lo.regression(deliveries(), target="margin")
    one = task.require(lo.rule.over("prediction >= 1", distance_km=(0, 50), stops=2, region="north"))
    (req,) = one.requirements
    # definition: one row per corner, columns distance_km, stops, region.north, region.south, intercept
    np.testing.assert_array_equal(-req.A, [[0, 2, 1, 0, 1], [50, 2, 1, 0, 1]])
    np.testing.assert_array_equal(req.rhs, [-1, -1])
    two = task.require(lo.rule.over("prediction >= 1", distance_km=(0, 50), stops=(1, 1), region=["east", "south"]))
    rows = {tuple(r) for r in -two.requirements[0].A}
    assert rows == {(0, 1, 0, 0, 1), (50, 1, 0, 0, 1), (0, 1, 0, 1, 1), (50, 1, 0, 1, 1)}
    fit = two.solve()
    assert fit.status == "optimal"
    at = pd.DataFrame({"distance_km": [0.0, 50.0, 0.0, 50.0], "stops": 1.0, "region": ["east", "east", "south", "south"]})
    assert fit.predict(at).min() >= 1 - 1e-7


def test_without_an_intercept_every_level_has_its_own_column():
    frame = deliveries(seed=9)
    rule = lo.rule.over("prediction >= 0", **BOX, region="every")
    task = lo.regression(frame, target="margin", intercept=False).require(rule)
    # definition: no reference level, so each corner row has exactly one level column set
    A = -task.requirements[0].A
    assert A.shape == (12, 5) and np.all(A[:, 2:].sum(axis=1) == 1)
    fit = task.solve()
    assert fit.status == "optimal"
    w = np.array([fit.coef["distance_km"], fit.coef["stops"]])
    res = linprog(w, bounds=[BOX["distance_km"], BOX["stops"]], method="highs")      # scipy (HiGHS)
    assert min(res.fun + fit.coef[f"region.{level}"] for level in LEVELS) >= -1e-7

def test_comparison_with_a_coefficient_and_the_method_in_the_verdict():
    task = lo.regression(deliveries(), target="margin")
    rule = lo.rule.over("prediction >= 10 * stops", **BOX, region="every")   # stops: the coefficient
    verdict = str(task.require(rule).check())
    assert "4 corners of the box for each of the 3 levels of region" in verdict
    assert "exact for a linear model" in verdict
    fit = task.require(rule).solve()
    assert fit.status == "optimal"
    bound = 10 * fit.coef["stops"]
    for level in LEVELS:
        assert box_minimum(fit, level) >= bound - 1e-7


def test_many_corners_are_screened_and_still_exact():
    rng = np.random.default_rng(5)
    X = rng.uniform(0, 1, (400, 12))
    y = X @ rng.normal(0, 1, 12) - 1.0 + rng.normal(0, 0.1, 400)
    names = [f"x{j}" for j in range(12)]
    rule = lo.rule.over("prediction >= 0", **{n: (0, 1) for n in names})
    fit = lo.regression(X, y).require(rule).solve()
    assert fit.status == "optimal" and fit.task.requirements[0].rows == 2 ** 12
    res = linprog(fit.coef.to_numpy(), bounds=[(0, 1)] * 12, method="highs")   # scipy (HiGHS)
    assert res.fun + fit.intercept >= -1e-7
    free = lo.regression(X, y).solve()           # the rule binds: without it the box goes below 0
    assert linprog(free.coef.to_numpy(), bounds=[(0, 1)] * 12, method="highs").fun + free.intercept < -0.1


@pytest.mark.parametrize("make,kind,fragments", [
    (lambda: lo.rule.over("prediction >= 0", region="every"), lo.DataError,
     ["distance_km and stops have no range", "(low, high) pair or one value"]),
    (lambda: lo.rule.over("prediction >= 0", distnce_km=(0, 5), stops=(0, 4), region="every"), lo.DataError,
     ["distnce_km is not a feature", "nearest known: distance_km", "distance_km has no range"]),
    (lambda: lo.rule.over("prediction >= 0", distance_km=(50, 0), stops=(0, 4), region="every"), lo.ParameterError,
     ["distance_km", "low at most high", "(0, 50)"]),
    (lambda: lo.rule.over("prediction >= 0", distance_km=(0, float("inf")), stops=(0, 4), region="every"),
     lo.ParameterError, ["distance_km", "finite"]),
    (lambda: lo.rule.over("prediction >= 0", **BOX, region="west"), lo.DataError,
     ["region has no level 'west'", "'east', 'north', 'south'"]),
    (lambda: lo.rule.over("prediction >= 0", distance_km="every", stops=(0, 4), region=(0, 1)), lo.DataError,
     ["distance_km is a number feature", "region is an encoded column"]),
    (lambda: lo.rule.over("prediction >= 0 where region == 'north'", **BOX, region="every"), lo.DataError,
     ["no 'where'", "region='north'"]),
    (lambda: lo.rule.over("mean(prediction) >= 0", **BOX, region="every"), lo.DataError, ["mean(...)"]),
    (lambda: lo.rule.over("stops >= 0", **BOX, region="every"), lo.DataError, ["names no prediction"]),
    (lambda: lo.rule.over("prediction >= 0"), lo.ParameterError, ["give the box"]),
])
def test_mistakes_are_refused_with_the_names_and_the_fix(make, kind, fragments, reliability):
    task = lo.regression(deliveries(n=60), target="margin")
    with pytest.raises(kind) as info:
        task.require(make())
    assert isinstance(info.value, lo.LearnoptError)
    for fragment in fragments:
        assert fragment in str(info.value)


def test_too_many_corners_are_refused_with_the_count_and_the_fix(reliability):
    rng = np.random.default_rng(6)
    X = rng.normal(size=(50, 17))
    task = lo.regression(X, X[:, 0])
    with pytest.raises(lo.ParameterError) as info:
        task.require(lo.rule.over("prediction >= 0", **{f"x{j}": (0, 1) for j in range(17)}))
    assert "131072 corners" in str(info.value) and "limit 65536" in str(info.value)
    assert "single value" in str(info.value)
    fixed = task.require(lo.rule.over("prediction >= 0", **{f"x{j}": (0, 1) if j < 16 else 0.5 for j in range(17)}))
    assert fixed.requirements[0].rows == 2 ** 16


def test_model_file_keeps_the_rule_and_it_compiles_the_same(tmp_path):
    rule = lo.rule.over("prediction >= 0", **BOX, region=["north", "south"])
    fit = lo.regression(deliveries(), target="margin").require(rule).solve()
    fit.save(tmp_path / "fit.json")
    saved = json.loads((tmp_path / "fit.json").read_text())
    assert saved["task"]["rules"][0]["rule"] == "Over"
    back = lo.load_fit(tmp_path / "fit.json")
    assert back.status == "optimal" and back.task.rules == (rule,)
    (again,) = back.task.rules[0].compile(back.task.context())
    np.testing.assert_array_equal(again.A, fit.task.requirements[0].A)
    np.testing.assert_array_equal(again.rhs, fit.task.requirements[0].rhs)


RECIPE = """
[data]
path = "rows.csv"
[task]
kind = "regression"
target = "margin"
[[task.rules_over]]
rule = "prediction >= 0"
box = { distance_km = [0, 50], stops = [0, 4], region = "every" }
[outputs]
fit = "fit.json"
"""


def test_recipe_with_a_rule_over_a_box_runs_like_its_python_twin(tmp_path):
    pytest.importorskip("pydantic")
    from learnopt.interface import jobs
    from learnopt.interface.recipes import read_recipe
    frame = deliveries(seed=7)
    frame.to_csv(tmp_path / "rows.csv", index=False)
    (tmp_path / "r.toml").write_text(RECIPE)
    job = jobs.run(read_recipe(tmp_path / "r.toml"))
    twin = lo.regression(pd.read_csv(tmp_path / "rows.csv"), target="margin").require(
        lo.rule.over("prediction >= 0", distance_km=(0, 50), stops=(0, 4), region="every")).solve()
    assert job.fit.status == "optimal" and job.task.rules == twin.task.rules
    np.testing.assert_allclose(job.fit.coef.to_numpy(), twin.coef.to_numpy(), atol=1e-7)
    assert lo.load_fit(tmp_path / "fit.json").task.rules == twin.task.rules


@pytest.mark.parametrize("box,fragments", [
    ("{ distance_km = [50, 0], stops = [0, 4], region = 'every' }", ["task.rules_over[0]", "low at most high"]),
    ("{ distance_km = [0, 50], region = 'every' }", ["task.rules_over[0]", "stops has no range"]),
    ("{ distance_km = [0, 50], stops = [0, 4], region = 'west' }", ["task.rules_over[0]", "no level 'west'"]),
])
def test_recipe_mistakes_name_their_place(tmp_path, box, fragments, reliability):
    pytest.importorskip("pydantic")
    from learnopt.interface import jobs
    from learnopt.interface.recipes import read_recipe
    deliveries(n=40).to_csv(tmp_path / "rows.csv", index=False)
    (tmp_path / "r.toml").write_text(RECIPE.replace(
        'box = { distance_km = [0, 50], stops = [0, 4], region = "every" }', f"box = {box}"))
    with pytest.raises(lo.DataError) as info:
        jobs.run(read_recipe(tmp_path / "r.toml"))
    for fragment in fragments:
        assert fragment in str(info.value)


@pytest.mark.slow
def test_sharded_data_takes_the_box_rule_too(tmp_path):
    distributed = pytest.importorskip("distributed")
    pytest.importorskip("pyarrow")
    frame = deliveries(n=3000, seed=8)
    for k, rows in enumerate(np.array_split(np.arange(len(frame)), 3)):
        frame.iloc[rows].to_parquet(tmp_path / f"part{k}.parquet", index=False)
    rule = lo.rule.over("prediction >= 0", **BOX, region="every")
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0",
                                       silence_logs=50)
    client = distributed.Client(cluster, set_as_default=False)
    try:
        fit = lo.regression(str(tmp_path / "part*.parquet"), target="margin").require(rule).solve(client=client)
    finally:
        client.close()
        cluster.close()
    ref = lo.regression(frame, target="margin").require(rule).solve()     # the same task in memory
    assert fit.status == "optimal" and fit.route == "sharded"
    np.testing.assert_allclose(fit.coef.to_numpy(), ref.coef.to_numpy(), atol=1e-6)
    for level in LEVELS:
        assert box_minimum(fit, level) >= -1e-7


def test_a_hand_edited_model_file_rule_is_refused(tmp_path, reliability):
    rule = lo.rule.over("prediction >= 0", **BOX, region="every")
    fit = lo.regression(deliveries(n=80), target="margin").require(rule).solve()
    fit.save(tmp_path / "fit.json")
    saved = json.loads((tmp_path / "fit.json").read_text())
    saved["task"]["rules"][0]["fields"]["ranges"][0][1] = 99.0          # low above high
    (tmp_path / "bad.json").write_text(json.dumps(saved))
    with pytest.raises(lo.DataError) as info:
        lo.load_fit(tmp_path / "bad.json")
    assert "lo.rule.over" in str(info.value)
