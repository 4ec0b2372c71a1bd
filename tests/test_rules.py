"""The rule language: forms, errors, non-convex rules, safety."""
import numpy as np
import pandas as pd
import pytest

import learnopt as lo


@pytest.fixture
def df():
    rng = np.random.default_rng(2)
    n = 120
    d = pd.DataFrame({"a": rng.normal(size=n), "b": rng.normal(size=n), "c": rng.normal(size=n),
                      "segment": rng.choice(["retail", "trade"], n), "region": rng.choice(["north", "south"], n)})
    d["cost"] = 1.0 + 0.1 * rng.normal(size=n)
    d["y"] = 2 * d.a - d.b + 0.5 * d.c + rng.normal(size=n)
    return d


def task(df):
    return lo.regression(df, target="y", features=["a", "b", "c"])


@pytest.mark.parametrize("rule,check", [
    ("a >= 0.5", lambda f: f.coef.a >= 0.5 - 1e-8),
    ("0 <= b <= 0.2", lambda f: -1e-8 <= f.coef.b <= 0.2 + 1e-8),
    ("a + b + c == 1", lambda f: abs(f.coef.sum() - 1) < 1e-8),
    ("2*a - b <= 3", lambda f: 2 * f.coef.a - f.coef.b <= 3 + 1e-8),
    ("c >= a", lambda f: f.coef.c >= f.coef.a - 1e-8),
    ("increasing(a, b, c)", lambda f: f.coef.a <= f.coef.b + 1e-8 and f.coef.b <= f.coef.c + 1e-8),
    ("decreasing(c, a)", lambda f: f.coef.c >= f.coef.a - 1e-8),
    ("nonnegative(b, c)", lambda f: f.coef.b >= -1e-8 and f.coef.c >= -1e-8),
    ("norm1(a, b) <= 2", lambda f: abs(f.coef.a) + abs(f.coef.b) <= 2 + 1e-7),
    ("norm2(a, b, c) <= 1", lambda f: np.linalg.norm(f.coef[["a", "b", "c"]]) <= 1 + 1e-7),
    ("intercept == 0.25", lambda f: abs(f.intercept - 0.25) < 1e-8),
    ("a / 2 <= 0.5", lambda f: f.coef.a <= 1 + 1e-8),
])
def test_rule_forms_hold_and_certify(df, rule, check):
    # common practice: every constraint holds at the returned point; the fit certifies
    fit = task(df).require(rule).solve()
    assert fit.status == "optimal", fit.message
    assert check(fit)


def test_prediction_rules_hold_on_selected_rows(df):
    t = task(df).require("prediction >= cost where segment == 'retail'",
                         "mean(prediction where region == 'north') - mean(prediction where region == 'south') <= 0.05",
                         "prediction <= 3")
    fit = t.solve()
    assert fit.status == "optimal"
    pred = fit.predict(df)
    retail = (df.segment == "retail").to_numpy()
    assert np.all(pred[retail] >= df.cost.to_numpy()[retail] - 1e-7)
    north, south = (df.region == "north").to_numpy(), (df.region == "south").to_numpy()
    assert pred[north].mean() - pred[south].mean() <= 0.05 + 1e-7
    assert pred.max() <= 3 + 1e-7


@pytest.mark.parametrize("rule", ["a*b <= 1", "norm2(a, b) >= 1", "a == b**2", "norm1(a, b) == 1",
                                  "1 / a <= 2", "-norm2(a, b) <= 1"])
def test_non_convex_rules_raise_naming_the_rule(df, rule):
    with pytest.raises(lo.NotConvexError, match="not convex") as info:
        task(df).require(rule)
    assert rule in str(info.value)


@pytest.mark.parametrize("rule,fragment", [
    ("distnce >= 0", "unknown name 'distnce'"),
    ("aa >= 0", "nearest known: a"),
    ("__import__('os') >= 0", "unknown function"),
    ("a.real >= 0", "unknown name 'a.real'"),
    ("(a + b).real >= 0", "cannot follow an expression"),
    ("open('x') >= 0", "unknown function"),
    ("a >= ", "not valid rule syntax"),
    ("-" * 100 + "a >= 0", "nested"),
    ("(" * 1000 + "a" + ")" * 1000 + " >= 0", "not valid rule syntax"),
    ("a >= 0" + " + a" * 2000, "longer than the limit"),
    ("a >= 1e400", "too large"),
    ("prediction >= 0 where segment == 'nope'", "selects no rows"),
    ("a", "a rule must be a comparison"),
    ("segment >= 0", "not numeric"),
    ("a != 0", "use <=, >=, =="),
])
def test_bad_rules_give_clear_errors(df, rule, fragment):
    with pytest.raises(lo.DataError) as info:
        task(df).require(rule)
    assert fragment in str(info.value)


def test_every_problem_is_listed_at_once(df):
    with pytest.raises(lo.LearnoptError) as info:
        task(df).require("zz >= 0", "a*b <= 1", "qq <= 1")
    assert len(info.value.problems) == 3


def test_levels_and_reference_levels(df):
    t = lo.regression(df, target="y", features=["a", "region"])
    assert "region.south" in t.features and "region.north" not in t.features  # north is the reference
    fit = t.require("region.south >= 0.3", "region.north <= {region.south}").solve()
    assert fit.coef["region.south"] >= 0.3 - 1e-8


def test_bounds_object(df):
    fit = task(df).require(lo.rule.bounds(a=(None, 1.0), b=(0, 0.1))).solve()
    assert fit.coef.a <= 1 + 1e-8 and -1e-8 <= fit.coef.b <= 0.1 + 1e-8


def test_require_returns_new_task(df):
    base = task(df)
    ruled = base.require("a >= 3")
    assert base.rules == () and len(ruled.rules) == 1


def test_earlier_shape_names_are_still_read_with_a_note():
    rng = np.random.default_rng(4)
    frame = pd.DataFrame({"a": rng.normal(size=60), "b": rng.normal(size=60)})
    frame["y"] = -frame["a"] + rng.normal(size=60)
    with pytest.warns(lo.OldSpellingWarning, match="nonnegative"):
        old = lo.regression(frame, "y").require("nonneg(a)").solve()
    new = lo.regression(frame, "y").require("nonnegative(a)").solve()
    assert old.objective == new.objective and new.coef["a"] == 0.0
