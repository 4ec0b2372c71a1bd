"""Solving: statuses, prices, conflicts, fallbacks, weights, limit cases, custom terms."""
import cvxpy as cp
import numpy as np
import pandas as pd
import pytest

import learnopt as lo


@pytest.fixture
def data():
    rng = np.random.default_rng(4)
    X = rng.normal(size=(80, 3))
    y = X @ np.array([1.5, -1.0, 0.7]) + 0.3 + 0.2 * rng.normal(size=80)
    return X, y


@pytest.mark.parametrize("rule,relaxed", [
    ("x0 <= 1", "x0 <= {}"),
    ("x0 + x1 + x2 == 0.5", "x0 + x1 + x2 == {}"),
    ("norm2(x0, x1) <= 1", "norm2(x0, x1) <= {}"),
])
@pytest.mark.parametrize("loss", ["squared", "absolute", lo.loss.huber(0.3)])
def test_prices_match_finite_differences(data, rule, relaxed, loss):
    # common practice (sensitivity of the optimal value): objective falls by about price * h
    X, y = data
    base = lo.regression(X, y, loss=loss).penalize(lo.penalty.l2(0.01))
    fit = base.require(rule).solve(tol=1e-10)
    assert fit.status == "optimal"
    bound = float(rule.split()[-1])
    h = 1e-4
    moved = base.require(relaxed.format(bound + h)).solve(tol=1e-10)
    fd = (fit.objective - moved.objective) / h
    assert fit.prices[rule] == pytest.approx(fd, rel=2e-2, abs=1e-5)
    assert bool(fit.binding[rule])


def test_non_binding_rule_has_zero_price(data):
    X, y = data
    fit = lo.regression(X, y).require("x0 <= 100").solve()
    assert fit.prices["x0 <= 100"] == 0.0 and not fit.binding["x0 <= 100"]


def test_infeasible_names_the_conflicting_rules(data):
    X, y = data
    fit = lo.regression(X, y).require("x0 >= 2", "x0 + x1 <= 0", "x1 >= 1", "x2 <= 5").solve()
    assert fit.status == "infeasible"
    # every rule of the conflict named, each with the amount it alone must move (worked by hand:
    # x0 >= 2 and x1 >= 1 force x0 + x1 >= 3 against x0 + x1 <= 0)
    assert dict(fit.conflicts) == pytest.approx({"x0 >= 2": 3.0, "x0 + x1 <= 0": 3.0, "x1 >= 1": 3.0}, abs=1e-9)
    assert "x2 <= 5" not in fit.conflicts.index


@pytest.mark.parametrize("rules,amounts", [
    # worked by hand: x <= 0 must move to 500 (2x >= 1000 holds at x = 500); 2x >= 1000 must move to 0
    (["2*x0 >= 1000", "x0 <= 0"], {"2*x0 >= 1000": 1000.0, "x0 <= 0": 500.0}),
    (["x0 == 500", "x0 == 500.5"], {"x0 == 500": 0.5, "x0 == 500.5": 0.5}),
    # a rule and its contradiction are both named, whatever else the task holds
    (["x0 >= 1", "x0 <= 0", "x1 <= 3"], {"x0 >= 1": 1.0, "x0 <= 0": 1.0}),
    # a chained rule is named as written
    (["0 <= x0 <= 2", "x0 >= 3"], {"0 <= x0 <= 2": 1.0, "x0 >= 3": 1.0}),
    # closed forms: the unit disc against the half-plane x0 + x1 >= 3 (distance 3/sqrt(2))
    (["norm2(x0, x1) <= 1", "x0 + x1 >= 3"], {"norm2(x0, x1) <= 1": 3 / np.sqrt(2) - 1, "x0 + x1 >= 3": 3 - np.sqrt(2)}),
])
def test_conflicts_name_an_irreducible_set_and_exact_amounts(data, rules, amounts):
    X, y = data
    fit = lo.regression(X, y).require(*rules).solve()
    assert fit.status == "infeasible"
    assert dict(fit.conflicts) == pytest.approx(amounts, rel=1e-9, abs=1e-9)


def test_a_rule_that_alone_cannot_resolve_the_conflict_needs_infinity(data):
    # two independent conflicts: one set is named, and each of its rules alone is not enough
    X, y = data
    fit = lo.regression(X, y).require("x0 >= 1", "x0 <= 0", "x1 >= 1", "x1 <= 0").solve()
    assert fit.status == "infeasible" and len(fit.conflicts) == 2
    assert np.all(np.isinf(fit.conflicts.to_numpy()))


def test_infeasible_prediction_rules():
    df = pd.DataFrame({"x": np.linspace(0, 1, 20), "y": np.linspace(0, 1, 20),
                       "g": ["a"] * 10 + ["b"] * 10})
    fit = lo.regression(df, target="y", features=["x"]).require(
        "prediction >= 5 where g == 'a'", "prediction <= 1", "x >= 0").solve()
    assert fit.status == "infeasible"
    assert len(fit.conflicts) >= 1


def test_loose_solve_is_reported_unverified(data):
    X, y = data
    task = lo.regression(X, y).penalize(lo.penalty.l1(0.05)).require("x0 + x1 == 0.2")
    fit = task.solve(solver="scs", tol=1e-2, fallback=False, solver_options={"max_iters": 30})
    assert fit.status == "unverified"
    assert "gap" in fit.message or "violated" in fit.message


def test_misbehaving_solver_falls_back_and_records(monkeypatch, data):
    X, y = data
    real = cp.Problem.solve

    def broken(self, *args, solver=None, **kwargs):
        if solver == "CLARABEL":
            raise cp.error.SolverError("simulated crash")
        return real(self, *args, solver=solver, **kwargs)

    monkeypatch.setattr(cp.Problem, "solve", broken)
    fit = lo.regression(X, y).penalize(lo.penalty.l2(0.1)).solve(route="direct")
    assert fit.status == "optimal" and fit.solver != "clarabel"
    assert fit.attempts[0].solver == "clarabel" and "simulated crash" in fit.attempts[0].outcome


def test_solver_claiming_infeasible_is_not_believed(monkeypatch, data):
    X, y = data
    real = cp.Problem.solve

    def liar(self, *args, solver=None, **kwargs):
        out = real(self, *args, solver=solver, **kwargs)
        if solver == "CLARABEL":
            self._status = cp.INFEASIBLE
        return out

    monkeypatch.setattr(cp.Problem, "solve", liar)
    fit = lo.regression(X, y).require("x0 >= 0").solve(route="direct")
    assert fit.status == "optimal" and fit.solver != "clarabel"
    assert "rejected" in fit.attempts[0].outcome


def test_unknown_and_incapable_solvers():
    X, y = np.eye(3), np.ones(3)
    with pytest.raises(lo.SolverError, match=r"Unknown solver 'clarabell' \(nearest known: clarabel"):
        lo.regression(X, y).solve(solver="clarabell")
    with pytest.raises(lo.SolverError, match="osqp cannot solve exponential cone"):
        lo.classification(X, [0, 1, 1], loss="logistic").solve(solver="osqp", route="direct")


def test_weight_k_equals_k_copies(data):
    # common practice: an integer row weight k is the same as repeating the row k times
    X, y = data
    k = np.arange(80) % 3 + 1
    for loss in ["squared", "absolute", lo.loss.quantile(0.3), lo.loss.huber(0.2)]:
        weighted = lo.regression(X, y, loss=loss, weights=k).solve(tol=1e-10)
        repeated = lo.regression(np.repeat(X, k, axis=0), np.repeat(y, k), loss=loss).solve(tol=1e-10)
        assert weighted.objective == pytest.approx(repeated.objective, rel=1e-7)


def test_huge_huber_threshold_equals_least_squares(data):
    # common practice: huber with delta beyond every residual is least squares
    X, y = data
    h = lo.regression(X, y, loss=lo.loss.huber(1e6)).solve()
    ls = lo.regression(X, y).solve()
    np.testing.assert_allclose(h.coef, ls.coef, atol=1e-7)


def test_custom_penalty_convex_and_not(data):
    X, y = data
    fit = lo.regression(X, y).penalize(lo.penalty.custom(lambda w: 0.1 * cp.norm(w, 2), name="norm")).solve()
    assert fit.status in ("optimal", "unverified")
    with pytest.raises(lo.NotConvexError, match="Counterexample"):
        lo.regression(X, y).penalize(lo.penalty.custom(lambda w: -cp.sum_squares(w)))
    with pytest.raises(lo.NotConvexError, match="may still be convex"):
        lo.regression(X, y).penalize(lo.penalty.custom(lambda w: cp.sqrt(cp.sum_squares(w) + 1)))


def test_timings_and_evidence(data):
    X, y = data
    fit = lo.regression(X, y).penalize(lo.penalty.l1(0.01)).solve()
    t = fit.timings.as_dict()
    assert set(t) == {"build", "compile", "solve", "certify", "total"}
    assert all(v >= 0 for v in t.values()) and t["total"] >= t["certify"]
    assert fit.route == "compressed" and fit.solver in lo.installed_solvers()
    assert "statistical estimate" in fit.summary()
    plain = lo.regression(X, y).solve()     # least squares without terms: answered by the factor itself
    assert plain.solver == "numpy" and plain.status == "optimal"


def test_classification_predict_and_evaluate():
    rng = np.random.default_rng(3)
    df = pd.DataFrame({"x": rng.normal(size=200), "z": rng.normal(size=200)})
    df["label"] = np.where(df.x - df.z + 0.3 * rng.normal(size=200) > 0, "late", "on_time")
    fit = lo.classification(df, target="label", loss="hinge").penalize(lo.penalty.l2(0.01)).solve()
    ev = fit.evaluate(df)
    assert set(fit.predict(df)) <= {"late", "on_time"}
    assert ev["accuracy"] + ev["zero_one"] == pytest.approx(1.0)
    assert ev.confusion.to_numpy().sum() == 200
    assert ev["accuracy"] > 0.85


def test_problem_is_the_cvxpy_problem(data):
    X, y = data
    prob = lo.regression(X, y).penalize(lo.penalty.l1(0.1)).problem()
    assert isinstance(prob, cp.Problem) and prob.is_dcp()
    prob.solve(solver="CLARABEL")
    assert prob.value == pytest.approx(lo.regression(X, y).penalize(lo.penalty.l1(0.1)).solve().objective, rel=1e-6)


def test_check_reports_pieces_and_data_notes():
    X = np.column_stack([np.ones(10), np.arange(10.0)])
    verdict = lo.regression(X, np.arange(10.0)).require("x1 >= 0").check()
    assert verdict.convex and "constant column" in str(verdict)


def test_custom_loss_with_conjugate_certifies(data):
    # a custom squared loss with its conjugate u^2/4 must reproduce the built-in squared fit
    X, y = data
    custom = lo.loss.custom(lambda z: cp.square(z), name="my_squared", conjugate=lambda u: u ** 2 / 4)
    fit = lo.regression(X, y, loss=custom).penalize(lo.penalty.l1(0.05)).solve()
    ref = lo.regression(X, y).penalize(lo.penalty.l1(0.05)).solve()
    assert fit.status == "optimal"
    assert fit.objective == pytest.approx(ref.objective, rel=1e-8)
    no_conj = lo.regression(X, y, loss=lo.loss.custom(lambda z: cp.square(z))).solve()
    assert no_conj.status == "unverified" and "no conjugate" in no_conj.message
    with pytest.raises(lo.NotConvexError, match="Custom loss"):
        lo.regression(X, y, loss=lo.loss.custom(lambda z: -cp.abs(z)))


def test_intercept_rule_without_intercept(data):
    X, y = data
    with pytest.raises(lo.DataError, match="no intercept"):
        lo.regression(X, y, intercept=False).require("intercept >= 0")


def test_compare_lists_every_solver_with_reason(data):
    X, y = data
    table = lo.classification(X, (y > 0).astype(int), loss="logistic").compare(["clarabel", "osqp", "scs"])
    assert list(table.index) == ["clarabel", "osqp", "scs"]
    assert table.loc["clarabel", "status"] == "optimal"
    # the newton route hands quadratic step problems to solvers, so OSQP can fit a logistic loss
    assert table.loc["osqp", "status"] == "optimal"
    socp = lo.regression(X, y).require("norm2(x0, x1) <= 1").compare(["clarabel", "osqp"])
    assert socp.loc["osqp", "status"] == "not run" and "cannot solve SOCP" in socp.loc["osqp", "note"]
    assert table.loc["clarabel", "max_coef_diff"] == pytest.approx(0.0, abs=1e-6) or \
        table["max_coef_diff"].min() == 0.0
    lp = lo.regression(X, y, loss="absolute").compare(["highs", "clarabel", "ecos"])
    assert (lp["status"] == "optimal").all()
    assert lp["max_coef_diff"].max() < 1e-5


@pytest.mark.parametrize("fault", ["raises", "nan", "lies optimal", "lies infeasible", "returns nothing"])
def test_injected_solver_faults_never_give_a_wrong_optimal(monkeypatch, data, fault, reliability):
    # every capable solver misbehaves the same way: the fit must not be marked optimal unless
    # its own certificate confirms the point; attempts record what happened
    X, y = data
    task = lo.regression(X, y).penalize(lo.penalty.l1(0.05)).require("x0 <= 1")
    truth = task.solve()
    real = cp.Problem.solve

    def broken(self, *args, solver=None, **kwargs):
        if fault == "raises":
            raise cp.error.SolverError("injected fault")
        out = real(self, *args, solver=solver, **kwargs)
        theta = [v for v in self.variables() if v.name() == "theta"]
        if fault == "nan" and theta:
            theta[0].value = np.full(theta[0].shape, np.nan)
        if fault == "lies optimal" and theta:
            theta[0].value = theta[0].value + 0.5          # a wrong point with the status "optimal"
        if fault == "lies infeasible":
            self._status = cp.INFEASIBLE
        if fault == "returns nothing" and theta:
            theta[0].value = None
        return out

    monkeypatch.setattr(cp.Problem, "solve", broken)
    fit = task.solve(route="direct")
    assert len(fit.attempts) >= 2
    if fit.status == "optimal":
        assert fit.objective == pytest.approx(truth.objective, rel=1e-6)
        reliability.record("solver fault", "certified anyway (point checked)")
    else:
        assert fit.status in ("unverified", "failed")
        reliability.record("solver fault", f"reported {fit.status}")
    if fit.status == "optimal" and abs(fit.objective - truth.objective) > 1e-6 * abs(truth.objective):
        reliability.record("solver fault", "WRONG ANSWER MARKED OPTIMAL")


def test_interrupted_writes_leave_nothing_half_written(tmp_path, monkeypatch, data):
    # nothing lost (common practice): the output is written to a temporary file and renamed;
    # a failure before the rename leaves neither a partial file nor the temporary one
    import os
    X, y = data
    fit = lo.regression(X, y).solve()
    target = tmp_path / "fit.json"

    def interrupted(src, dst):
        raise KeyboardInterrupt("simulated interruption")

    monkeypatch.setattr(os, "replace", interrupted)
    with pytest.raises(KeyboardInterrupt):
        fit.save(target)
    assert not target.exists() and not list(tmp_path.iterdir())


@pytest.mark.parametrize("strength", [20.0, 1e3])
def test_prices_at_a_kink_are_the_rate_relaxing_delivers(strength):
    # a sign rule on a coefficient that the l1 penalty already holds at zero: the solver's
    # multiplier is not unique there, and the price must be the rate of the optimal value as
    # the rule is relaxed (checked by finite differences, common practice), here zero
    from learnopt.interface.demo import make_data
    df = make_data()
    feat = ["distance_km", "stops", "size", "region"]
    base = lo.regression(df, target="minutes", loss=lo.loss.huber(2.0), features=feat).penalize(
        lo.penalty.l1(strength))
    fit = base.require("distance_km >= 0").solve()
    relaxed = base.require("distance_km >= -0.01").solve()
    assert fit.status == "optimal" and relaxed.status == "optimal"
    rate = (fit.objective - relaxed.objective) / 0.01
    assert fit.prices["distance_km >= 0"] == pytest.approx(rate, abs=1e-6)


def test_an_unbounded_claim_on_a_task_bounded_below_is_rejected(monkeypatch, data):
    # every built-in loss and penalty is >= 0, so the objective cannot fall without limit
    # (common practice: a claim contradicting a lower bound is a solver failure)
    X, y = data
    real = cp.Problem.solve

    def liar(self, *args, solver=None, **kwargs):
        if solver == "ECOS":
            out = real(self, *args, solver=solver, **kwargs)
            self._status = "unbounded"
            return out
        return real(self, *args, solver=solver, **kwargs)

    monkeypatch.setattr(cp.Problem, "solve", liar)
    task = lo.regression(X, y, loss=lo.loss.huber(1.0)).penalize(lo.penalty.l1(0.01)).require("x0 >= 0")
    fit = task.solve("ecos", route="direct")
    assert fit.status == "optimal" and fit.solver != "ecos"
    assert "bounded below" in fit.attempts[0].outcome and "rejected" in fit.attempts[0].outcome


def test_an_answer_from_another_solver_than_the_one_asked_says_so(monkeypatch, data):
    X, y = data
    real = cp.Problem.solve

    def broken(self, *args, solver=None, **kwargs):
        if solver == "OSQP":
            raise cp.error.SolverError("simulated crash")
        return real(self, *args, solver=solver, **kwargs)

    monkeypatch.setattr(cp.Problem, "solve", broken)
    fit = lo.regression(X, y).penalize(lo.penalty.l2(0.1)).solve("osqp", route="direct")
    assert fit.status == "optimal" and fit.solver != "osqp"
    assert f"comes from {fit.solver}, not from osqp" in fit.message and "simulated crash" in fit.message
    table = fit.attempt_table()
    assert list(table.index[:2]) == ["osqp", fit.solver] and "attempts:" in fit.summary()


def test_a_chained_rule_is_priced_under_the_text_the_user_wrote(data):
    # prices keyed by the rule as written, the pieces offered too; the price is the rate of the
    # optimal value as the binding half is relaxed (finite differences, common practice)
    X, y = data
    base = lo.regression(X, y)
    fit = base.require("-10 <= x0 <= 0.5").solve()
    assert fit.status == "optimal" and fit.binding["-10 <= x0 <= 0.5"] and fit.binding["x0 <= 0.5"]
    assert fit.prices["-10 <= x0 <= 0.5"] == fit.prices["x0 <= 0.5"] + fit.prices["-10 <= x0"]
    relaxed = base.require("-10 <= x0 <= 0.501").solve()
    rate = (fit.objective - relaxed.objective) / 0.001
    assert fit.prices["-10 <= x0 <= 0.5"] == pytest.approx(rate, rel=2e-3)


def test_a_long_fit_shows_progress_lines_and_a_quick_one_none(data, capsys, monkeypatch):
    # a line per certificate check once the fit has run for a while (here: from the start)
    from learnopt.solve import loop
    X, y = data
    task = lo.regression(X, y, loss=lo.loss.huber(1.0)).penalize(lo.penalty.l1(0.01))
    task.solve(progress=True)
    assert capsys.readouterr().err == ""                      # quick: nothing
    monkeypatch.setattr(loop, "PROGRESS_AFTER", 0.0)         # as if it had run long
    fit = task.solve(progress=True)
    err = capsys.readouterr().err
    assert fit.status == "optimal" and "relative gap" in err and fit.route in err
    task.solve(progress=False)
    assert capsys.readouterr().err == ""


@pytest.mark.parametrize("loss", ["squared", "absolute", "huber", "quantile"])
def test_rules_with_room_to_spare_have_price_exactly_zero(loss):
    # complementary slackness (common practice, any convex programming text): a rule that does
    # not bind has multiplier 0, so a non-binding rule shows 0, never solver round-off
    for seed in range(4):
        rng = np.random.default_rng(seed)
        X = rng.normal(size=(150, 3))
        frame = pd.DataFrame(X, columns=list("abc")).assign(y=X @ [1.0, -0.5, 0.2] + rng.normal(size=150))
        fit = lo.regression(frame, "y", loss=loss).require("a <= 0.5", "b >= -5", "c <= 3",
                                                            "prediction >= -50").solve()
        assert fit.status == "optimal"
        assert (fit.prices[~fit.binding] == 0.0).all(), fit.prices[~fit.binding]
        assert fit.binding["a <= 0.5"] and not fit.binding[["b >= -5", "c <= 3", "prediction >= -50"]].any()
        assert "multipliers" in fit.extras          # the raw values stay available


def test_rule_standing_holds_back_then_room_in_the_order_written():
    # room is the distance to the limit, computed here by hand from the coefficients and the
    # rows (definition); a chained rule is one rule as written
    rng = np.random.default_rng(5)
    X = rng.normal(size=(200, 3))
    frame = pd.DataFrame(X, columns=["a", "b", "c"]).assign(y=X @ [2.0, -1.0, 0.3] + rng.normal(size=200))
    rules = ["b >= -3", "0 <= a <= 1.5", "c <= 2", "prediction >= -40", "a + c <= 10"]
    fit = lo.regression(frame, "y").require(*rules).solve()
    st = fit.rule_standing()
    assert list(st.index) == ["0 <= a <= 1.5", "b >= -3", "c <= 2", "prediction >= -40", "a + c <= 10"]
    assert st.loc["0 <= a <= 1.5", "holds_back"] and st.loc["0 <= a <= 1.5", "gain_per_unit"] > 0
    a, b, c = fit.coef[["a", "b", "c"]]
    assert st.loc["b >= -3", "room"] == pytest.approx(b + 3, abs=1e-7)
    assert st.loc["c <= 2", "room"] == pytest.approx(2 - c, abs=1e-7)
    assert st.loc["a + c <= 10", "room"] == pytest.approx(10 - a - c, abs=1e-7)
    assert st.loc["prediction >= -40", "room"] == pytest.approx(float(np.min(fit.predict(frame))) + 40, abs=1e-6)
    assert (st.loc[~st["holds_back"], "gain_per_unit"] == 0).all()
    assert st["room_share"].between(0, 1).all()
    text = fit.summary()
    assert "rules holding the fit back" in text and "rules with room to spare" in text
