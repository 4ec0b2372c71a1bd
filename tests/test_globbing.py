"""Absolute and quantile regression on many rows, solved on the rows near the answer with the
others gathered into two summary rows (Portnoy and Koenker 1997), certified on every row.
References: the same task solved whole by learnopt's own route, and scikit-learn's
QuantileRegressor (HiGHS) on the same rows for the unpenalised, unruled case."""
import numpy as np
import pandas as pd
import pytest

import learnopt as lo
from learnopt.solve.globbing import GLOB_ROWS
from learnopt.solve.loop import solve_task
from learnopt.solve.routes.base import Settings


def _frame(n, seed):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 4))
    frame = pd.DataFrame(X, columns=["a", "b", "c", "e"])
    frame["y"] = X @ [1.0, -0.5, 0.3, 0.0] + rng.standard_t(3, size=n)
    return frame


@pytest.mark.parametrize("loss,rules", [("absolute", ()), (lo.loss.quantile(0.8), ("a <= 0.8",)),
                                        (lo.loss.quantile(0.25), ("e >= 0",))])
def test_gathered_rows_give_the_whole_task_answer(loss, rules):
    frame = _frame(GLOB_ROWS + 2000, seed=3)
    task = lo.regression(frame, "y", loss=loss).require(*rules)
    fit = task.solve()
    assert fit.status == "optimal" and fit.extras["gathered"]["kept"] < frame.shape[0]
    assert "checks every row" in fit.message
    whole = solve_task(task, Settings())
    assert whole.status == "optimal"
    assert fit.objective == pytest.approx(whole.objective, rel=1e-7)


def test_median_regression_matches_scikit_learn():
    from sklearn.linear_model import QuantileRegressor
    frame = _frame(GLOB_ROWS + 1000, seed=5)
    fit = lo.regression(frame, "y", loss="absolute").solve()
    ref = QuantileRegressor(quantile=0.5, alpha=0.0, solver="highs").fit(frame[["a", "b", "c", "e"]], frame["y"])
    ours = np.abs(fit.predict(frame) - frame["y"]).mean()
    theirs = np.abs(ref.predict(frame[["a", "b", "c", "e"]]) - frame["y"]).mean()
    assert ours == pytest.approx(theirs, rel=1e-7) and fit.objective == pytest.approx(ours, rel=1e-10)
