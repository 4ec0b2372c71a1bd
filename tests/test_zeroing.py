"""The top of the default grid: the smallest strength at which every penalised coefficient is zero,
with the rules in force. Checked the way its definition reads (common practice: the optimality
conditions of the lasso-type problem at zero): single solves just above it give all zeros,
just below it do not, and the path's first point is all zero while the second is not.
"""
from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import learnopt as lo
from learnopt.interface.recipes import load_recipe

ROOT = Path(__file__).resolve().parents[1]


def _data(classify: bool, seed: int = 5):
    rng = np.random.default_rng(seed)
    n = 160
    X = rng.normal(size=(n, 4)) + np.array([0.5, 0.0, -0.3, 0.2])
    score = X @ [1.5, -1.0, 0.0, 0.6] + 0.4 + 0.5 * rng.normal(size=n)
    frame = pd.DataFrame(X, columns=["a", "b", "c", "e"])
    frame["y"] = np.where(score > 0, "yes", "no") if classify else score
    return frame


CASES = [(loss, False) for loss in ("squared", "absolute", lo.loss.huber(1.0), lo.loss.quantile(0.7),
                                     lo.loss.epsilon_insensitive(0.2))] + \
        [(loss, True) for loss in ("logistic", "hinge", "squared_hinge")]
RULES = [(), ("a >= 0",), ("b <= 0", "a >= 0"), ("a + b + c + e <= 1",), ("nonnegative(a, e)",)]


def _task(loss, classify, rules):
    build = lo.classification if classify else lo.regression
    return build(_data(classify), "y", loss=loss).require(*rules)


def _nonzero(fit) -> int:
    return int(np.sum(np.abs(fit.coef.to_numpy()) > 1e-7))


@pytest.mark.parametrize("rules", RULES, ids=lambda r: "|".join(r) or "no-rules")
@pytest.mark.parametrize("loss,classify", CASES, ids=lambda c: getattr(c, "name", str(c)))
def test_the_grid_starts_exactly_where_coefficients_turn_on(loss, classify, rules):
    task = _task(loss, classify, rules)
    path = task.path(lo.penalty.l1(1.0), n=4, ratio=0.5)
    top = float(path.table["strength"].iloc[0])
    assert path.table["nonzero"].iloc[0] == 0, path.table
    above = task.penalize(lo.penalty.l1(top * 1.001)).solve()
    below = task.penalize(lo.penalty.l1(top * 0.99)).solve()
    assert above.status == "optimal" and below.status == "optimal"
    assert _nonzero(above) == 0
    assert _nonzero(below) > 0, (top, below.coef.to_dict())


@pytest.mark.parametrize("recipe", ["deliveries.toml", "energy.toml", "quality.toml"])
def test_bundled_recipes_paths_start_all_zero_and_then_turn_on(recipe, tmp_path):
    folder = tmp_path / "recipes"
    shutil.copytree(ROOT / "recipes", folder)
    task = load_recipe(folder / recipe)
    # the recipe's own l1-type penalty, else an l1 penalty added for the path (an l2 penalty
    # alone never sets coefficients to zero, so it has no zeroing strength)
    l1_type = [k for k, p in enumerate(task.penalties) if p.describe().startswith(("l1", "elastic"))]
    path = task.path(l1_type[0] if l1_type else lo.penalty.l1(1.0), n=5)
    counts = list(path.table["nonzero"])
    assert counts[0] == 0 and counts[1] > 0, counts
