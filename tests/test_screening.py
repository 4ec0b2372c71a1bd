"""Rules on predictions over many rows, solved on the rows that matter and certified on every row.

References: the same task solved whole (every row in one program, learnopt's own route), and
the same problem written directly in cvxpy and solved by Clarabel (an independent formulation)."""
import cvxpy as cp
import numpy as np
import pandas as pd
import pytest

import learnopt as lo
from learnopt.solve.loop import solve_task
from learnopt.solve.routes.base import Settings


def _frame(n=6000, d=5, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, d))
    frame = pd.DataFrame(X, columns=[f"x{j}" for j in range(d)])
    frame["y"] = X @ rng.normal(size=d) + rng.normal(size=n)
    frame["cost"] = rng.uniform(-5.0, -2.0, n)
    frame["segment"] = rng.choice(["retail", "trade"], n)
    return frame


def test_a_rule_that_never_binds_costs_one_plain_solve():
    frame = _frame()
    plain = lo.regression(frame, "y", features=[f"x{j}" for j in range(5)]).solve()
    fit = lo.regression(frame, "y", features=[f"x{j}" for j in range(5)]).require("prediction >= -50").solve()
    assert fit.status == "optimal" and fit.extras["screened"] == {"kept": 0, "rows": 6000, "rounds": 1}
    assert fit.objective == pytest.approx(plain.objective, rel=1e-12)
    assert "checks every row" in fit.message and fit.prices["prediction >= -50"] == 0.0


@pytest.mark.parametrize("loss", ["squared", "absolute", "huber"])
def test_a_binding_rule_gives_the_whole_task_answer(loss):
    frame = _frame(seed=1)
    features = [f"x{j}" for j in range(5)]
    task = lo.regression(frame, "y", loss=loss, features=features).require(
        "prediction >= cost where segment == 'retail'", "x0 <= 0.5")
    fit = task.solve()
    assert fit.status == "optimal" and 0 < fit.extras["screened"]["kept"] < fit.extras["screened"]["rows"]
    whole = solve_task(task, Settings())                               # every row in one program
    assert whole.status == "optimal"
    assert fit.objective == pytest.approx(whole.objective, rel=1e-7, abs=1e-9)
    np.testing.assert_allclose(fit.coef.to_numpy(), whole.coef.to_numpy(), atol=1e-4)
    # independent formulation (squared loss: the mean square, learnopt's convention)
    if loss == "squared":
        X, y = frame[features].to_numpy(), frame["y"].to_numpy()
        w, b = cp.Variable(5), cp.Variable()
        retail = (frame["segment"] == "retail").to_numpy()
        ref = cp.Problem(cp.Minimize(cp.sum_squares(X @ w + b - y) / len(y)),
                         [X[retail] @ w + b >= frame["cost"].to_numpy()[retail], w[0] <= 0.5])
        ref.solve(solver="CLARABEL")
        assert fit.objective == pytest.approx(ref.value, rel=1e-6)
    rows = fit.predict(frame)[(frame["segment"] == "retail").to_numpy()] - frame["cost"][frame["segment"] == "retail"]
    assert rows.min() >= -1e-6                                           # every row keeps the rule
