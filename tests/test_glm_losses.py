"""Counts and amounts: the Poisson, Gamma and Tweedie deviances with a log link, offsets and
exposure. Each check against the outside world names its source beside it.

Scaling (see learnopt.terms.count_losses): learnopt's objective is the weighted mean *half*
unit deviance, i.e. (1/(2n)) sum deviance with equal weights -- scikit-learn's data term; its
penalty alpha/2 ||w||^2 is learnopt's l2(alpha / 2). statsmodels' GLM maximises the likelihood
(same unpenalised optimum).
"""
import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from sklearn.linear_model import GammaRegressor, PoissonRegressor, TweedieRegressor

import learnopt as lo
from click.testing import CliRunner
from learnopt.interface.cli import main
from learnopt.terms.count_losses import tweedie_root

TIGHT = dict(tol=1e-12, gap_tol=1e-12)


def _relative(a, b):
    a, b = np.asarray(a, float), np.asarray(b, float)
    return float(np.max(np.abs(a - b) / np.maximum(np.abs(b), 1e-300)))


def _scotland():
    data = sm.datasets.scotland.load_pandas().data
    return data, [c for c in data.columns if c != "YES"]


def _fair():
    data = sm.datasets.fair.load_pandas().data
    return data, [c for c in data.columns if c != "affairs"]


def _cpunish():
    # as in statsmodels' own GLM tests (results from R): the fourth regressor is logged
    data = sm.datasets.cpunish.load_pandas().data.copy()
    data["VC100k96"] = np.log(data["VC100k96"])
    return data, [c for c in data.columns if c != "EXECUTIONS"]


def _statsmodels(y, X, family, **kw):
    return sm.GLM(y, sm.add_constant(X, prepend=False), family=family, **kw).fit(method="newton", tol=1e-14,
                                                                                  maxiter=200)


# ----------------------------------------------------------------------------- the losses themselves

LOSSES = [lo.loss.poisson(), lo.loss.gamma(), lo.loss.tweedie(1.5), lo.loss.tweedie(1.1), lo.loss.tweedie(1.9)]
ETA = np.linspace(-3.0, 3.0, 25)


@pytest.mark.parametrize("loss", LOSSES, ids=lambda l: l.describe())
def test_fenchel_young_per_row(loss):
    # Fenchel-Young: f(z) + f*(u) >= u z on dom f*, with equality at u = f'(z); every row its own target
    rng = np.random.default_rng(3)
    y = rng.gamma(2.0, 1.5, size=ETA.size) + (0.1 if loss.name == "gamma" else 0.0)
    if loss.name != "gamma":
        y[::4] = 0.0
    rows = loss.given(y)
    low, high = rows.dual_domain()
    for _ in range(40):
        u = np.clip(rng.normal(scale=4.0, size=y.size), low, np.minimum(high, 50.0))
        for z in (-2.0, 0.0, 1.5):
            zz = np.full(y.size, z)
            assert np.all(rows.value(zz) + rows.conjugate(u) >= u * zz - 1e-10)
    g = rows.gradient(ETA)
    np.testing.assert_allclose(rows.value(ETA) + rows.conjugate(g), ETA * g, rtol=1e-11, atol=1e-11)
    # outside the domain the conjugate is +inf
    if np.any(np.isfinite(low)):
        k = np.flatnonzero(np.isfinite(low))
        assert np.all(np.isinf(rows.rows(k).conjugate(low[k] - 1.0)))
    if np.any(np.isfinite(high)):
        assert np.all(np.isinf(rows.conjugate(high + 1.0)))


@pytest.mark.parametrize("loss", LOSSES, ids=lambda l: l.describe())
def test_value_is_half_unit_deviance_and_derivatives(loss):
    # the half unit deviance as statsmodels' families write the unit deviance (resid_dev^2 = unit deviance)
    y = np.array([0.5, 1.0, 2.5, 7.0, 0.3])
    mu = np.exp(ETA[:5])
    family = {"poisson": sm.families.Poisson(), "gamma": sm.families.Gamma(sm.families.links.Log())}.get(
        loss.name) or sm.families.Tweedie(var_power=loss.power, link=sm.families.links.Log())
    np.testing.assert_allclose(loss.given(y).value(ETA[:5]), 0.5 * family.resid_dev(y, mu) ** 2, rtol=1e-10)
    h = 1e-6
    rows = loss.given(y)
    fd = (rows.value(ETA[:5] + h) - rows.value(ETA[:5] - h)) / (2 * h)
    np.testing.assert_allclose(rows.gradient(ETA[:5]), fd, rtol=1e-6, atol=1e-7)
    fd2 = (rows.gradient(ETA[:5] + h) - rows.gradient(ETA[:5] - h)) / (2 * h)
    np.testing.assert_allclose(rows.curvature(ETA[:5]), fd2, rtol=1e-6, atol=1e-7)


def test_tweedie_root_meets_its_equation_across_scales():
    v = np.concatenate([-np.logspace(-12, 12, 60), [0.0], np.logspace(-12, 12, 60)])
    for p in (1.01, 1.5, 1.99):
        t = tweedie_root(v, p)
        lhs = np.where(np.abs(t) < 1, np.exp((1 - p) * t) * np.expm1(np.clip(t, -1, 1)),
                       np.exp((2 - p) * t) - np.exp((1 - p) * t))
        np.testing.assert_allclose(lhs, v, rtol=1e-12, atol=1e-300)


# ----------------------------------------------------------------------------- unpenalised: statsmodels

def test_gamma_log_link_matches_statsmodels_on_scotland():
    # source: statsmodels GLM, Gamma family with a log link, on its bundled Scottish vote data
    data, feats = _scotland()
    ref = _statsmodels(data["YES"], data[feats], sm.families.Gamma(link=sm.families.links.Log()))
    for route in ("newton", "direct"):
        fit = lo.regression(data, "YES", lo.loss.gamma()).solve(route=route, **TIGHT)
        assert fit.status == "optimal", fit.message
        assert _relative(fit.theta, ref.params.to_numpy()) < (1e-9 if route == "newton" else 1e-6)


def test_poisson_matches_statsmodels_and_the_published_r_values_on_cpunish():
    # source: statsmodels GLM Poisson on its bundled cpunish data; and the R values statsmodels' own
    # tests check it against (results_glm.Cpunish: coefficients, then the intercept)
    r_values = [2.611017e-04, 7.781801e-02, -9.493111e-02, 2.969349e-01, 2.301183e+00, -1.872207e+01,
                -6.801480e+00]
    data, feats = _cpunish()
    ref = _statsmodels(data["EXECUTIONS"], data[feats], sm.families.Poisson())
    fit = lo.regression(data, "EXECUTIONS", lo.loss.poisson()).solve(**TIGHT)
    assert fit.status == "optimal" and fit.route == "newton", fit.message
    assert _relative(fit.theta, ref.params.to_numpy()) < 1e-8
    assert _relative(fit.theta, r_values) < 5e-6          # R's values are printed to 7 digits


def test_exposure_matches_the_worked_example_with_exposure_100():
    # source: statsmodels GLM Poisson with exposure=100 on cpunish, and R's values for that model
    # (statsmodels' tests, results_glm.Cpunish_offset: intercept first): only the intercept moves, by -log(100)
    r_values = [-1.140665e+01, 2.611017e-04, 7.781801e-02, -9.493111e-02, 2.969349e-01, 2.301183e+00,
                -1.872207e+01]
    data, feats = _cpunish()
    data["years"] = 100.0
    ref = _statsmodels(data["EXECUTIONS"], data[feats], sm.families.Poisson(), exposure=data["years"])
    task = lo.regression(data, "EXECUTIONS", lo.loss.poisson(), exposure="years")
    assert "years" not in task.features
    fit = task.solve(**TIGHT)
    assert fit.status == "optimal", fit.message
    assert _relative(fit.theta, ref.params.to_numpy()) < 1e-8
    assert _relative(np.r_[fit.intercept, fit.coef.to_numpy()], r_values) < 5e-6
    # predictions are counts for the row's exposure: statsmodels' predict with the same exposure
    np.testing.assert_allclose(fit.predict(data).to_numpy(), ref.predict(
        sm.add_constant(data[feats], prepend=False), exposure=data["years"]), rtol=1e-8)
    np.testing.assert_allclose(fit.decision(data).to_numpy(), np.log(fit.predict(data).to_numpy()), rtol=1e-12)


def test_exposure_varying_by_row_equals_its_log_as_offset_and_statsmodels():
    # source: statsmodels GLM Poisson with exposure= (varying per row; seeded invented counts)
    rng = np.random.default_rng(5)
    n = 400
    X = rng.normal(size=(n, 3))
    years = rng.uniform(0.2, 3.0, n)
    y = rng.poisson(years * np.exp(X @ [0.4, -0.3, 0.1] - 0.5))
    frame = pd.DataFrame(X, columns=["a", "b", "c"]).assign(claims=y, years=years, log_years=np.log(years))
    ref = _statsmodels(y, frame[["a", "b", "c"]], sm.families.Poisson(), exposure=years)
    by_exposure = lo.regression(frame.drop(columns="log_years"), "claims", "poisson", exposure="years").solve(**TIGHT)
    by_offset = lo.regression(frame.drop(columns="years"), "claims", "poisson", offset="log_years").solve(**TIGHT)
    assert by_exposure.status == by_offset.status == "optimal"
    assert _relative(by_exposure.theta, ref.params.to_numpy()) < 1e-8
    np.testing.assert_allclose(by_offset.theta, by_exposure.theta, rtol=1e-10, atol=1e-12)


def test_tweedie_matches_statsmodels_on_the_fair_data():
    # source: statsmodels GLM Tweedie(var_power=1.5, log link) on its bundled affairs data (68% zeros)
    data, feats = _fair()
    ref = _statsmodels(data["affairs"], data[feats], sm.families.Tweedie(var_power=1.5, link=sm.families.links.Log()))
    fit = lo.regression(data, "affairs", lo.loss.tweedie(1.5)).solve(**TIGHT)
    assert fit.status == "optimal", fit.message
    assert _relative(fit.theta, ref.params.to_numpy()) < 1e-6


def test_offset_with_the_squared_loss_shifts_the_residual():
    # independent formulation: least squares of (y - offset) on the features
    rng = np.random.default_rng(2)
    X = rng.normal(size=(200, 2))
    o = rng.normal(size=200)
    y = X @ [1.0, 2.0] + o + 0.1 * rng.normal(size=200)
    fit = lo.regression(X, y, offset=o).solve()
    A = np.c_[X, np.ones(200)]
    np.testing.assert_allclose(fit.theta, np.linalg.lstsq(A, y - o, rcond=None)[0], rtol=1e-7, atol=1e-9)
    assert fit.route != "compressed"
    np.testing.assert_allclose(fit.predict(X[:5], offset=o[:5]), A[:5] @ fit.theta + o[:5], rtol=1e-12)


# ----------------------------------------------------------------------------- penalised: scikit-learn

@pytest.mark.parametrize("make, peer", [
    (lo.loss.poisson, lambda a: PoissonRegressor(alpha=a, solver="newton-cholesky", tol=1e-12, max_iter=500)),
    (lo.loss.gamma, lambda a: GammaRegressor(alpha=a, solver="newton-cholesky", tol=1e-12, max_iter=500)),
    (lambda: lo.loss.tweedie(1.5), lambda a: TweedieRegressor(power=1.5, link="log", alpha=a,
                                                              solver="newton-cholesky", tol=1e-12, max_iter=500)),
], ids=["poisson", "gamma", "tweedie"])
def test_penalised_fits_match_scikit_learn(make, peer):
    # source: scikit-learn's Poisson/Gamma/TweedieRegressor, objective (1/(2n)) sum deviance + alpha/2 |w|^2,
    # which is learnopt's mean half deviance + l2(alpha/2); seeded invented data
    rng = np.random.default_rng(11)
    n, alpha = 600, 0.05
    X = rng.normal(size=(n, 4))
    mu = np.exp(X @ [0.3, -0.2, 0.0, 0.25] + 0.7)
    y = rng.poisson(mu).astype(float) if make().name != "gamma" else rng.gamma(2.0, mu / 2.0)
    ref = peer(alpha).fit(X, y)
    fit = lo.regression(X, y, make()).penalize(lo.penalty.l2(alpha / 2)).solve(**TIGHT)
    assert fit.status == "optimal", fit.message
    assert _relative(np.r_[fit.coef.to_numpy(), fit.intercept], np.r_[ref.coef_, ref.intercept_]) < 1e-5
    np.testing.assert_allclose(fit.predict(X[:20]), ref.predict(X[:20]), rtol=1e-5)


# ----------------------------------------------------------------------------- certificate and routes

def test_certificate_bounds_a_loose_solve_with_rules():
    # the certificate is a valid bound: P(loose) - P(tight) <= gap(loose)
    data, feats = _cpunish()
    task = lo.regression(data, "EXECUTIONS", "poisson").require("INCOME <= 0.0002", "SOUTH >= 2.5")
    tight = task.solve(**TIGHT)
    assert tight.status == "optimal", tight.message
    for solver in ("scs", "clarabel"):
        loose = task.solve(solver=solver, route="direct", tol=1e-4, gap_tol=1e-2, fallback=False)
        if loose.status in ("optimal", "unverified") and loose.violation <= 1e-9:
            assert loose.objective - tight.objective <= loose.gap + 1e-9
    assert tight.binding["INCOME <= 0.0002"] and tight.prices["INCOME <= 0.0002"] > 0


def test_routes_that_cannot_take_a_log_link_loss_say_why():
    rng = np.random.default_rng(0)
    X = rng.normal(size=(50, 2))
    task = lo.regression(X, rng.poisson(2.0, 50), "poisson")
    for route, words in (("working-set", "piecewise-linear"), ("compressed", "squared loss")):
        with pytest.raises(lo.ParameterError, match=words):
            task.solve(route=route)
    offset_task = lo.regression(X, rng.normal(size=50), offset=np.ones(50))
    with pytest.raises(lo.ParameterError, match="offset"):
        offset_task.solve(route="compressed")


def test_check_says_convex_smooth_exponential_cone():
    verdict = lo.regression(np.eye(3), [1, 2, 0], lo.loss.tweedie(1.4)).check()
    assert verdict.convex
    line = dict(verdict.pieces)["loss tweedie(power=1.4)"]
    assert "convex" in line and "smooth" in line and "exponential cone" in line


# ----------------------------------------------------------------------------- mistakes

def test_negative_counts_are_refused_naming_rows():
    frame = pd.DataFrame({"x": [1.0, 2, 3, 4], "claims": [1, -1, 0, -2]})
    with pytest.raises(lo.DataError, match=r"'claims' has 2 value.*rows 1, 3.*at least 0") as info:
        lo.regression(frame, "claims", "poisson")
    assert isinstance(info.value, lo.LearnoptError)


def test_zero_gamma_targets_are_refused():
    frame = pd.DataFrame({"x": [1.0, 2, 3], "amount": [2.0, 0.0, 1.5]})
    with pytest.raises(lo.DataError, match=r"'amount' has 1 value.*row.* 1.*above 0"):
        lo.regression(frame, "amount", lo.loss.gamma())


def test_non_positive_exposure_is_refused_naming_rows():
    frame = pd.DataFrame({"x": [1.0, 2, 3, 4], "n": [1, 2, 0, 3], "t": [1.0, 0.0, 2.0, -1.0]})
    with pytest.raises(lo.DataError, match=r"exposure column 't' has 2 value.*rows 1, 3.*above 0"):
        lo.regression(frame, "n", "poisson", exposure="t")


def test_tweedie_power_out_of_range_is_a_parameter_error():
    with pytest.raises(lo.ParameterError, match=r"tweedie\(power=2.5\): power has to be between 1 and 2"):
        lo.loss.tweedie(2.5)


def test_offset_and_exposure_together_and_missing_columns():
    frame = pd.DataFrame({"x": [1.0, 2, 3], "n": [1, 2, 0], "t": [1.0, 2.0, 3.0]})
    with pytest.raises(lo.ParameterError, match="offset= and exposure= were both given"):
        lo.regression(frame, "n", "poisson", offset="t", exposure="t")
    with pytest.raises(lo.DataError, match="exposure column 'years' is not in the data"):
        lo.regression(frame, "n", "poisson", exposure="years")


def test_new_data_without_the_exposure_column_is_refused():
    frame = pd.DataFrame({"x": [1.0, 2, 3, 4, 5], "n": [1, 2, 0, 3, 5], "t": [1.0, 2.0, 1.0, 3.0, 4.0]})
    fit = lo.regression(frame, "n", "poisson", exposure="t").solve()
    with pytest.raises(lo.DataError, match="no exposure column 't'"):
        fit.predict(frame[["x"]])
    arrays = lo.regression(frame[["x"]].to_numpy(), frame["n"].to_numpy(), "poisson",
                           exposure=frame["t"].to_numpy()).solve()
    with pytest.raises(lo.DataError, match="given as an array"):
        arrays.predict(frame[["x"]].to_numpy())
    np.testing.assert_allclose(arrays.predict(frame[["x"]].to_numpy(), offset=np.log(frame["t"])),
                               fit.predict(frame), rtol=1e-8)


# ----------------------------------------------------------------------------- files, recipes, evaluation

def test_model_file_round_trip_predicts_identically(tmp_path):
    data, feats = _cpunish()
    data["years"] = np.linspace(1.0, 3.0, len(data))
    fit = lo.regression(data, "EXECUTIONS", lo.loss.tweedie(1.3), exposure="years").solve()
    fit.save(tmp_path / "model.json")
    saved = json.loads((tmp_path / "model.json").read_text())
    assert saved["task"]["offset"] == {"kind": "exposure", "column": "years"}
    back = lo.load_fit(tmp_path / "model.json")
    assert back.status == "optimal" and back.task.loss == lo.loss.tweedie(1.3)
    np.testing.assert_array_equal(back.predict(data).to_numpy(), fit.predict(data).to_numpy())
    with pytest.raises(lo.DataError, match="no exposure column 'years'"):
        back.predict(data.drop(columns="years"))


def test_recipe_with_poisson_and_exposure_runs(tmp_path):
    rng = np.random.default_rng(9)
    n = 300
    frame = pd.DataFrame({"age": rng.uniform(20, 70, n), "urban": rng.integers(0, 2, n).astype(float),
                          "years": rng.uniform(0.5, 2.0, n)})
    frame["claims"] = rng.poisson(frame["years"] * np.exp(-2.0 + 0.02 * frame["age"] + 0.3 * frame["urban"]))
    frame.to_csv(tmp_path / "claims.csv", index=False)
    (tmp_path / "claims.toml").write_text(
        '[data]\npath = "claims.csv"\n\n[task]\nkind = "regression"\ntarget = "claims"\nexposure = "years"\n'
        'rules = ["urban >= 0"]\n\n[task.loss]\nname = "poisson"\n')
    task = lo.load_recipe(tmp_path / "claims.toml")
    fit = task.solve()
    twin = lo.regression(frame, "claims", lo.loss.poisson(), exposure="years").require("urban >= 0").solve()
    assert fit.status == "optimal" and "years" not in task.features
    np.testing.assert_allclose(fit.theta, twin.theta, rtol=1e-9)
    # the command line: held-out rows (their exposure read from the same column), model file, report
    (tmp_path / "run.toml").write_text(
        '[data]\npath = "claims.csv"\n\n[task]\nkind = "regression"\ntarget = "claims"\nexposure = "years"\n\n'
        '[task.loss]\nname = "poisson"\n\n[do]\naction = "solve"\nholdout = { fraction = 0.2, seed = 3 }\n\n'
        '[outputs]\nfit = "out/fit.json"\nreport = "out/report.html"\n')
    out = CliRunner().invoke(main, ["run", str(tmp_path / "run.toml")])
    assert out.exit_code == 0, out.output
    back = lo.load_fit(tmp_path / "out" / "fit.json")
    assert back.status == "optimal" and back.task.loss == lo.loss.poisson()
    page = (tmp_path / "out" / "report.html").read_text()
    assert "offset_i" in page and "Training residuals" in page and "Held-out evaluation" in page
    (tmp_path / "tweedie.toml").write_text(
        '[data]\npath = "claims.csv"\n\n[task]\nkind = "regression"\ntarget = "claims"\noffset = "years"\n\n'
        '[task.loss]\nname = "tweedie"\npower = 1.4\n')
    assert lo.load_recipe(tmp_path / "tweedie.toml").loss == lo.loss.tweedie(1.4)


def test_evaluate_reports_errors_of_the_mean_and_the_half_deviance():
    data, feats = _cpunish()
    fit = lo.regression(data, "EXECUTIONS", "poisson").solve()
    ev = fit.evaluate(data)
    mu = fit.predict(data).to_numpy()
    y = data["EXECUTIONS"].to_numpy()
    assert ev["mse"] == pytest.approx(np.mean((mu - y) ** 2), rel=1e-12)
    # source: statsmodels' Poisson unit deviance (mean over rows, halved)
    assert ev["loss"] == pytest.approx(0.5 * np.mean(sm.families.Poisson().resid_dev(y, mu) ** 2), rel=1e-10)
    assert ev["loss"] == pytest.approx(fit.objective, rel=1e-10)


def test_path_cross_validation_and_refits_carry_the_exposure():
    # every point of a path is certified; folds and refits keep each row's exposure with the row
    rng = np.random.default_rng(8)
    n = 300
    frame = pd.DataFrame(rng.normal(size=(n, 3)), columns=["a", "b", "c"]).assign(years=rng.uniform(0.5, 2.0, n))
    frame["claims"] = rng.poisson(frame["years"] * np.exp(0.5 * frame["a"] - 0.3 * frame["b"]))
    task = lo.regression(frame, "claims", "poisson", exposure="years").penalize(lo.penalty.l1(0.01))
    walk = task.path(n=8)
    assert all(f.status == "optimal" for f in walk.fits)
    cv = task.cross_validate(folds=3, n=5)
    assert cv.table["certified_folds"].min() == 3
    boot = task.solve().bootstrap(20, seed=1)
    assert boot is not None
    # the top of the path zeroes every coefficient: the intercept alone is then log(sum y / sum years)
    top = walk.fits[0]
    assert np.allclose(top.coef, 0.0) and top.intercept == pytest.approx(np.log(frame["claims"].sum() / frame["years"].sum()), rel=1e-7)
