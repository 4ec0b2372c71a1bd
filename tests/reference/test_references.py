"""Fits checked against published values and reference libraries (source named at each check)."""
import numpy as np
import pytest

import learnopt as lo

sm = pytest.importorskip("statsmodels.api")


def test_least_squares_matches_numpy_lstsq():
    # reference: numpy.linalg.lstsq on the same design with a column of ones
    rng = np.random.default_rng(3)
    X = rng.normal(size=(200, 5))
    y = X @ rng.normal(size=5) + 2.0 + rng.normal(size=200)
    fit = lo.regression(X, y).solve()
    ref, *_ = np.linalg.lstsq(np.column_stack([X, np.ones(200)]), y, rcond=None)
    assert fit.status == "optimal"
    np.testing.assert_allclose(fit.coef.to_numpy(), ref[:5], rtol=1e-7, atol=1e-8)
    assert fit.intercept == pytest.approx(ref[5], rel=1e-7)


def test_nonnegative_least_squares_scipy_docstring_example():
    # reference: scipy.optimize.nnls documentation example (found): x = [1.5, 1], residual 0.7071067811865475
    from scipy.optimize import nnls
    A = np.array([[1.0, 0.0], [1.0, 0.0], [0.0, 1.0]])
    b = np.array([2.0, 1.0, 1.0])
    fit = lo.regression(A, b, intercept=False).require("nonnegative(x0, x1)").solve()
    assert fit.status == "optimal"
    np.testing.assert_allclose(fit.coef.to_numpy(), [1.5, 1.0], atol=1e-7)
    assert fit.objective == pytest.approx(0.7071067811865475 ** 2 / 3, rel=1e-8)  # mean of squares
    x, rnorm = nnls(A, b)
    np.testing.assert_allclose(fit.coef.to_numpy(), x, atol=1e-7)


def test_nonnegative_least_squares_matches_scipy_nnls_random():
    # reference: scipy.optimize.nnls on a random problem where some coefficients hit zero
    from scipy.optimize import nnls
    rng = np.random.default_rng(5)
    A = rng.normal(size=(80, 6))
    b = A @ np.array([1.0, -2.0, 0.5, -0.3, 2.0, 0.0]) + 0.1 * rng.normal(size=80)
    task = lo.regression(A, b, intercept=False).require("nonnegative(x0, x1, x2, x3, x4, x5)")
    fit = task.solve(tol=1e-11, gap_tol=1e-10)
    x, _ = nnls(A, b)
    assert fit.status == "optimal"
    np.testing.assert_allclose(fit.coef.to_numpy(), x, atol=1e-7)


@pytest.fixture(scope="module")
def engel():
    return sm.datasets.engel.load_pandas().data


def test_median_regression_engel_published(engel):
    # reference: R quantreg rq on Engel data, tau=0.5 (found): intercept 81.48225, income 0.5601806;
    # exact LP optimum 8779.966324 (sum of pinball losses; scipy linprog HiGHS, see REFERENCES)
    fit = lo.regression(engel, target="foodexp", loss=lo.loss.quantile(0.5)).solve()
    assert fit.status == "optimal"
    assert fit.intercept == pytest.approx(81.48225, abs=5e-5)
    assert fit.coef["income"] == pytest.approx(0.5601806, abs=5e-7)
    assert fit.objective * len(engel) == pytest.approx(8779.966324, rel=1e-9)


def test_quantile_075_engel_stata(engel):
    # reference: Stata qreg results in statsmodels' quantile test results (found): 62.39648, .6440143
    fit = lo.regression(engel, target="foodexp", loss=lo.loss.quantile(0.75)).solve()
    assert fit.status == "optimal"
    assert fit.intercept == pytest.approx(62.39648, abs=5e-4)
    assert fit.coef["income"] == pytest.approx(0.6440143, abs=5e-6)


@pytest.mark.parametrize("solver", ["clarabel", "highs", "ecos", "scs"])
def test_median_regression_engel_every_lp_solver(engel, solver):
    # reference: same published optimum; trap from REFERENCES: HiGHS once called this infeasible
    fit = lo.regression(engel, target="foodexp", loss="absolute").solve(solver=solver)
    assert fit.status == "optimal"
    assert fit.objective * len(engel) * 0.5 == pytest.approx(8779.966324, rel=1e-6)


def test_logistic_spector_stata():
    # reference: Stata 11 logit on Spector data, in statsmodels' discrete-model test results (found)
    data = sm.datasets.spector.load_pandas().data
    task = lo.classification(data, target="GRADE", loss="logistic", positive=1.0)
    assert task.solve().status == "optimal"
    fit = task.solve(tol=1e-11, gap_tol=1e-11)   # coefficients of a flat optimum need a tight gap
    assert fit.status == "optimal"
    np.testing.assert_allclose(fit.coef[["GPA", "TUCE", "PSI"]].to_numpy(),
                               [2.82611297201, 0.0951576702557, 2.37868772835], rtol=1e-6)
    assert fit.intercept == pytest.approx(-13.0213483201, rel=1e-6)
    # and statsmodels' own Logit at its converged MLE: our objective = its mean negative log-likelihood
    res = sm.Logit(data["GRADE"], sm.add_constant(data[["GPA", "TUCE", "PSI"]])).fit(disp=0)
    assert fit.objective == pytest.approx(-res.llf / len(data), rel=1e-9)


@pytest.fixture(scope="module")
def diabetes():
    from sklearn.datasets import load_diabetes
    X, y = load_diabetes(return_X_y=True)
    return X, y


def test_lasso_objective_matches_scikit_learn(diabetes):
    # reference: scikit-learn Lasso minimises 1/(2n) RSS + alpha |w|_1; ours is mean r^2 + lam |w|_1,
    # so lam = 2 alpha and our objective is twice theirs. Flat objective: compare objectives (REFERENCES trap).
    from sklearn.linear_model import Lasso
    X, y = diabetes
    alpha = 0.1
    sk = Lasso(alpha=alpha, tol=1e-12, max_iter=100000).fit(X, y)
    fit = lo.regression(X, y).penalize(lo.penalty.l1(2 * alpha)).solve()
    sk_obj = np.mean((y - sk.predict(X)) ** 2) + 2 * alpha * np.abs(sk.coef_).sum()
    assert fit.status == "optimal"
    assert fit.objective == pytest.approx(sk_obj, rel=1e-7)
    assert fit.objective <= sk_obj * (1 + 1e-9)


def test_ridge_matches_scikit_learn(diabetes):
    # reference: scikit-learn Ridge minimises ||y - Xw - b||^2 + alpha ||w||^2 (no 1/n): lam = alpha / n
    from sklearn.linear_model import Ridge
    X, y = diabetes
    alpha = 0.5
    sk = Ridge(alpha=alpha, solver="cholesky").fit(X, y)
    fit = lo.regression(X, y).penalize(lo.penalty.l2(alpha / len(y))).solve()
    assert fit.status == "optimal"
    np.testing.assert_allclose(fit.coef.to_numpy(), sk.coef_, rtol=1e-6)
    assert fit.intercept == pytest.approx(sk.intercept_, rel=1e-8)


def test_elastic_net_objective_matches_scikit_learn(diabetes):
    # reference: scikit-learn ElasticNet: 1/(2n) RSS + a r |w|_1 + a (1 - r)/2 ||w||^2. Times two:
    # mean r^2 + 2 a r |w|_1 + a (1 - r) ||w||^2, i.e. lam*mix = 2 a r and lam*(1 - mix) = a (1 - r)
    from sklearn.linear_model import ElasticNet
    X, y = diabetes
    a, r = 0.01, 0.3
    sk = ElasticNet(alpha=a, l1_ratio=r, tol=1e-12, max_iter=100000).fit(X, y)
    lam = 2 * a * r + a * (1 - r)
    fit = lo.regression(X, y).penalize(lo.penalty.elastic_net(lam, 2 * a * r / lam)).solve()
    w = sk.coef_
    sk_obj = np.mean((y - sk.predict(X)) ** 2) + 2 * a * r * np.abs(w).sum() + a * (1 - r) * (w ** 2).sum()
    assert fit.status == "optimal"
    assert fit.objective == pytest.approx(sk_obj, rel=1e-8)
    np.testing.assert_allclose(fit.coef.to_numpy(), w, rtol=1e-4, atol=1e-3)


@pytest.mark.parametrize("loss,route", [("squared", None), ("squared", "direct"), ("squared", "newton"),
                                        (lo.loss.huber(1e7), None)],
                         ids=["compressed", "direct", "newton", "huber-newton"])
def test_longley_certified_values(loss, route):
    # reference: NIST StRD Longley certified values (found); cond(X) ~ 5e9. With default settings
    # every route works on centred and scaled columns (mapped back exactly) and reaches at least
    # 9 certified digits (measured 10.1 to 13.1); a huge Huber threshold is least squares
    data = sm.datasets.longley.load_pandas().data
    fit = lo.regression(data, target="TOTEMP", loss=loss).solve(route=route)
    certified = {"GNPDEFL": 15.0618722713733, "GNP": -0.0358191792925910, "UNEMP": -2.02022980381683,
                 "ARMED": -1.03322686717359, "POP": -0.0511041056535807, "YEAR": 1829.15146461355}
    assert fit.status == "optimal" and fit.extras["basis"] == "centred and scaled columns"
    for name, value in certified.items():
        assert fit.coef[name] == pytest.approx(value, rel=1e-9), name
    assert fit.intercept == pytest.approx(-3482258.63459582, rel=1e-9)


def test_rules_and_penalties_survive_the_change_of_basis():
    # the rewritten task is the same problem: a rule and an l1 penalty on Longley give the same
    # certified objective whether or not the basis is changed (common practice: reparametrisation)
    from learnopt.problem import basis
    data = sm.datasets.longley.load_pandas().data
    task = lo.regression(data, target="TOTEMP").penalize(lo.penalty.elastic_net(0.5, 0.5)).require(
        "GNPDEFL <= 10", "0.5 * UNEMP + ARMED >= -3")
    work, T = basis.conditioned(task)
    assert T is not None
    fit = task.solve()
    assert fit.status == "optimal" and fit.extras["basis"]
    assert fit.coef["GNPDEFL"] <= 10 + 1e-6 and fit.violation <= 1e-6
    # the original (unrewritten) problem solved by cvxpy directly: a feasible point no better than
    # ours beyond our certified gap (its own accuracy on this ill-conditioned data is poorer)
    prob = task.problem()
    prob.solve(solver="CLARABEL")
    assert fit.objective <= prob.value + fit.gap + 1e-9 * abs(fit.objective)


def test_ill_conditioned_polynomial_with_integer_coefficients():
    # exact answer by construction (common practice): y is an exact polynomial in t with integer
    # coefficients, so least squares must return them; the monomial columns t..t^8 on [1, 2]
    # make the design badly conditioned (about 1e8 after column scaling)
    t = np.linspace(1.0, 2.0, 60)
    X = np.column_stack([t ** k for k in range(1, 9)])
    coef = np.array([3.0, -1.0, 2.0, 5.0, -4.0, 1.0, 2.0, -1.0])
    y = 7.0 + X @ coef
    with pytest.warns(lo.AccuracyWarning, match="reliable to about"):
        fit = lo.regression(X, y).solve()
    assert fit.status == "optimal"
    np.testing.assert_allclose(fit.coef.to_numpy(), coef, rtol=0, atol=1e-5)
    assert fit.intercept == pytest.approx(7.0, abs=1e-5)
