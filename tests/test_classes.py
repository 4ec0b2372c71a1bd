"""Tasks with several classes: multinomial logistic and the multiclass hinge, checked against
outside references named beside each test (scikit-learn's LogisticRegression and LinearSVC on
its bundled iris and wine data, Stata's multinomial logit values for statsmodels' bundled anes96
data as kept in statsmodels' own test results, and independent cvxpy formulations)."""
import re

import cvxpy as cp
import numpy as np
import pandas as pd
import pytest

import learnopt as lo
from learnopt.solve.classes_certificate import certify_classes
from learnopt.terms.class_losses import Multinomial, MulticlassHinge, one_hot

sklearn = pytest.importorskip("sklearn")
from sklearn.datasets import load_iris, load_wine  # noqa: E402
from sklearn.linear_model import LogisticRegression  # noqa: E402


def _iris():
    iris = load_iris(as_frame=True)
    data = iris.frame.drop(columns="target").rename(columns=lambda c: c.replace(" (cm)", "").replace(" ", "_"))
    data["species"] = iris.target_names[iris.target]
    return data


def _theta(fit):
    """The flat point (class after class, then intercepts) of a sum-to-zero fit."""
    return np.concatenate([fit.coef.to_numpy().T.ravel(), fit.intercept.to_numpy()])


@pytest.mark.parametrize("lam", [1e-3, 0.01, 0.1])
def test_multinomial_l2_equals_scikit_learn_on_iris(lam):
    """scikit-learn LogisticRegression (lbfgs, multinomial, l2): C sum(loss) + |W|^2/2 equals our
    mean loss + lam |W|^2 with C = 1/(2 n lam); its fit keeps intercepts summing to zero, as ours."""
    data = _iris()
    fit = lo.classification(data, "species").penalize(lo.penalty.l2(lam)).solve()
    assert fit.status == "optimal" and fit.identification == "sum to zero"
    X, y = data.drop(columns="species"), data["species"]
    ref = LogisticRegression(C=1 / (2 * len(X) * lam), tol=1e-12, max_iter=100_000).fit(X, y)
    assert list(ref.classes_) == list(fit.labels)
    # weak penalties make the optimum flat (REFERENCES.md): coefficients to 1e-5 relative
    np.testing.assert_allclose(fit.coef.to_numpy(), ref.coef_.T, rtol=1e-5, atol=2e-5)
    np.testing.assert_allclose(fit.intercept.to_numpy(), ref.intercept_, rtol=1e-5, atol=2e-5)
    np.testing.assert_allclose(fit.probability(X).to_numpy(), ref.predict_proba(X), atol=1e-5)
    assert (fit.predict(X) == ref.predict(X)).all()
    theirs = certify_classes(fit.task, np.concatenate([ref.coef_.ravel(), ref.intercept_]))
    assert fit.objective <= theirs.primal + 1e-10          # ours is no worse than theirs
    assert theirs.primal - fit.objective <= 1e-9


def test_multinomial_on_wine_matches_scikit_learn_on_standardised_columns():
    """Wine (13 features, 3 classes), columns standardised first (scikit-learn's lbfgs needs it);
    l2 at 0.01. Objectives agree to 1e-9 and coefficients to 1e-5."""
    wine = load_wine(as_frame=True)
    X = (wine.data - wine.data.mean()) / wine.data.std(ddof=0)
    data = X.assign(cultivar=wine.target.map({0: "a", 1: "b", 2: "c"}))
    lam = 0.01
    fit = lo.classification(data, "cultivar").penalize(lo.penalty.l2(lam)).solve()
    assert fit.status == "optimal"
    ref = LogisticRegression(C=1 / (2 * len(X) * lam), tol=1e-12, max_iter=100_000).fit(X, data["cultivar"])
    np.testing.assert_allclose(fit.coef.to_numpy(), ref.coef_.T, atol=1e-5)
    theirs = certify_classes(fit.task, np.concatenate([ref.coef_.ravel(), ref.intercept_]))
    assert abs(theirs.primal - fit.objective) <= 1e-9


# Stata 11 multinomial logit of PID on logpopul, selfLR, age, educ, income (+ constant), base
# outcome 0, on the 944 rows of anes96: the values statsmodels keeps in
# statsmodels/discrete/tests/results/results_discrete.py (mnlogit_basezero; found)
STATA_PARAMS = np.reshape([
    -.01153598, .29771435, -.024945, .08249144, .00519655, -.37340167, -.08875065, .39166864, -.02289784,
    .18104276, .04787398, -2.2509132, -.1059667, .57345051, -.01485121, -.00715242, .05757516, -3.6655835,
    -.0915567, 1.2787718, -.00868135, .19982796, .08449838, -7.6138431, -.0932846, 1.3469616, -.01790407,
    .21693885, .08095841, -7.0604782, -.14088069, 2.0700801, -.00943265, .3219257, .10889408, -12.105751],
    (6, -1), order="F")
STATA_LLF = -1461.922747312


def _anes():
    sm = pytest.importorskip("statsmodels.api")
    d = sm.datasets.anes96.load_pandas()
    return d.exog.assign(PID=d.endog.astype(int))


def test_reference_class_reproduces_statas_multinomial_logit_on_anes96():
    data = _anes()
    fit = lo.classification(data, "PID", reference=0).solve()
    assert fit.status == "optimal" and fit.identification == "reference class 0"
    assert (fit.coef[0] == 0).all() and fit.intercept[0] == 0
    ours = np.vstack([fit.coef.to_numpy()[:, 1:], fit.intercept.to_numpy()[1:]])
    np.testing.assert_allclose(ours, STATA_PARAMS, rtol=2e-6, atol=2e-7)      # Stata prints 8 digits
    np.testing.assert_allclose(-fit.objective * len(data), STATA_LLF, rtol=1e-10)


def test_sum_to_zero_and_reference_class_are_the_same_fit():
    """Unpenalised, the two identifications differ only by a shift common to every class: the
    score differences agree, and the sum-to-zero coefficients sum to zero (common practice)."""
    data = _anes()
    ref = lo.classification(data, "PID", reference=0).solve()
    sym = lo.classification(data, "PID").solve()
    assert sym.status == "optimal"
    np.testing.assert_allclose(sym.coef.sum(axis=1), 0.0, atol=1e-9)
    assert abs(sym.intercept.sum()) < 1e-9
    np.testing.assert_allclose(sym.coef.sub(sym.coef[0], axis=0).to_numpy(), ref.coef.to_numpy(), atol=1e-7)
    assert abs(sym.objective - ref.objective) < 1e-10


def _crammer_singer(X, y, K, lam, intercept=True, rule=None):
    """An independent formulation: min mean(xi) + lam |W|^2 s.t. z_iy - z_ik >= 1 - xi_i (k != y), xi >= 0."""
    n, d = X.shape
    W, b, xi = cp.Variable((d, K)), cp.Variable(K), cp.Variable(n)
    Z = X @ W + (np.ones((n, 1)) @ cp.reshape(b, (1, K), order="F") if intercept else 0)
    cons = [xi >= 0]
    for k in range(K):
        rows = np.flatnonzero(y != k)
        zy = cp.hstack([Z[i, y[i]] for i in rows])
        cons.append(zy - Z[rows, k] >= 1 - xi[rows])
    if intercept:
        cons.append(cp.sum(b) == 0)
    if rule is not None:
        cons.append(rule(W))
    prob = cp.Problem(cp.Minimize(cp.sum(xi) / n + lam * cp.sum_squares(W)), cons)
    prob.solve(solver="CLARABEL", tol_gap_abs=1e-11, tol_gap_rel=1e-11, tol_feas=1e-11)
    return prob.value, W.value, b.value


@pytest.mark.parametrize("lam", [1e-3, 0.05])
@pytest.mark.parametrize("route", ["newton", "direct"])
def test_multiclass_hinge_equals_an_independent_formulation(lam, route):
    """The newton route smooths the hinge (mu * multinomial((z + [k != y]) / mu), mu falling) and
    certifies on the hinge itself; the direct route hands the margin program to a solver."""
    data = _iris()
    fit = lo.classification(data, "species", loss="hinge").penalize(lo.penalty.l2(lam)).solve(route=route)
    assert fit.status == "optimal" and fit.route == route
    X = data.drop(columns="species").to_numpy()
    y = np.array([fit.labels.index(v) for v in data["species"]])
    value, W, b = _crammer_singer(X, y, 3, lam)
    assert abs(fit.objective - value) < 1e-8
    np.testing.assert_allclose(fit.coef.to_numpy(), W, atol=1e-5)


def test_multiclass_hinge_without_intercept_equals_liblinear():
    """scikit-learn LinearSVC(multi_class='crammer_singer', fit_intercept=False): |W|^2/2 + C sum xi,
    i.e. ours with lam = 1/(2 n C). liblinear stops at its tol, so objectives agree to 1e-4."""
    from sklearn.svm import LinearSVC

    data = _iris()
    X = data.drop(columns="species").to_numpy()
    lam = 0.01
    fit = lo.classification(data, "species", loss="hinge", intercept=False).penalize(lo.penalty.l2(lam)).solve()
    assert fit.status == "optimal"
    svc = LinearSVC(multi_class="crammer_singer", fit_intercept=False, C=1 / (2 * len(X) * lam), tol=1e-10,
                    max_iter=1_000_000).fit(X, data["species"])
    theirs = certify_classes(fit.task, svc.coef_.ravel()).primal
    assert theirs >= fit.objective - fit.gap          # weak duality: no point beats the certified bound
    assert theirs - fit.objective < 1e-4


def test_a_rule_for_one_class_binds_and_is_priced():
    """The rule holds only for the class it names; the fit equals the independent formulation
    with the same constraint, and the rule's price is positive (it binds)."""
    data = _iris()
    lam = 0.01
    base = lo.classification(data, "species", loss="hinge").penalize(lo.penalty.l2(lam))
    free = base.solve()
    assert free.coef.loc["petal_width", "versicolor"] < -0.1
    fit = base.require("petal_width >= 0 for class 'versicolor'").solve()
    assert fit.status == "optimal"
    assert fit.coef.loc["petal_width", "versicolor"] == pytest.approx(0.0, abs=1e-7)
    assert fit.coef.loc["petal_width", "setosa"] < 0          # other classes untouched by the rule
    rule = "petal_width >= 0 for class 'versicolor'"
    assert fit.binding[rule] and fit.prices[rule] > 0
    X = data.drop(columns="species").to_numpy()
    y = np.array([fit.labels.index(v) for v in data["species"]])
    value, W, _ = _crammer_singer(X, y, 3, lam, rule=lambda W: W[3, 1] >= 0)
    assert abs(fit.objective - value) < 1e-8
    assert fit.objective > free.objective
    # the keyword form is the same task
    same = base.require("petal_width >= 0", for_class="versicolor").solve()
    assert abs(same.objective - fit.objective) < 1e-10


def test_a_rule_without_a_class_holds_in_every_class():
    data = _iris()
    fit = lo.classification(data, "species", reference="setosa").penalize(lo.penalty.l2(0.01)) \
        .require("sepal_width >= -0.5").solve()
    assert fit.status == "optimal"
    assert (fit.coef.loc["sepal_width", ["versicolor", "virginica"]] >= -0.5 - 1e-8).all()
    with pytest.raises(lo.ParameterError, match="'setosa' is the reference class"):
        lo.classification(data, "species", reference="setosa").require("sepal_width >= 0 for class setosa")
    with pytest.raises(lo.DataError, match="'versicolour' is not a class.*versicolor"):
        lo.classification(data, "species").require("sepal_width >= 0 for class 'versicolour'")


def test_shared_penalty_drops_a_feature_from_every_class_at_once():
    """lo.penalty.shared is a group lasso with one group per feature across the classes; checked
    against the same problem written directly in cvxpy."""
    data = _iris()
    lam = 0.05
    fit = lo.classification(data, "species").penalize(lo.penalty.shared(lam)).solve()
    assert fit.status == "optimal"
    X = data.drop(columns="species").to_numpy()
    y = np.array([fit.labels.index(v) for v in data["species"]])
    n, d, K = len(X), X.shape[1], 3
    W, b = cp.Variable((d, K)), cp.Variable(K)
    Z = X @ W + np.ones((n, 1)) @ cp.reshape(b, (1, K), order="F")
    Y = one_hot(y, K)
    obj = cp.sum(cp.log_sum_exp(Z, axis=1) - cp.sum(cp.multiply(Y, Z), axis=1)) / n \
        + lam * np.sqrt(K) * cp.sum(cp.norm(W, 2, axis=1))
    prob = cp.Problem(cp.Minimize(obj), [cp.sum(b) == 0])
    prob.solve(solver="CLARABEL", tol_gap_abs=1e-11, tol_gap_rel=1e-11, tol_feas=1e-11)
    assert abs(fit.objective - prob.value) < 1e-7
    rows = np.linalg.norm(fit.coef.to_numpy(), axis=1)
    dropped = rows < 1e-6
    assert dropped.any() and not dropped.all()       # a feature leaves every class at once


def test_l1_per_class_and_an_unpenalised_feature():
    """An l1 penalty with factor 0 on one feature: that feature's coefficients sum to zero over
    the classes (the identification), the penalised ones need not. Certified and no worse than an
    independent cvxpy fit of the same problem."""
    data = _iris()
    lam = 0.02
    fit = lo.classification(data, "species").penalize(lo.penalty.l1(lam, factors={"petal_length": 0.0})).solve()
    assert fit.status == "optimal"
    assert abs(fit.coef.loc["petal_length"].sum()) < 1e-9
    X = data.drop(columns="species").to_numpy()
    y = np.array([fit.labels.index(v) for v in data["species"]])
    n, d, K = len(X), 4, 3
    W, b = cp.Variable((d, K)), cp.Variable(K)
    Z = X @ W + np.ones((n, 1)) @ cp.reshape(b, (1, K), order="F")
    Y = one_hot(y, K)
    mask = np.array([1.0, 1.0, 0.0, 1.0])[:, None]
    obj = cp.sum(cp.log_sum_exp(Z, axis=1) - cp.sum(cp.multiply(Y, Z), axis=1)) / n + lam * cp.sum(
        cp.abs(cp.multiply(mask, W)))
    prob = cp.Problem(cp.Minimize(obj), [cp.sum(b) == 0, cp.sum(W[2, :]) == 0])
    prob.solve(solver="CLARABEL")
    assert abs(fit.objective - prob.value) < 1e-7


def test_the_certificate_bounds_the_distance_to_the_optimum():
    """Weak duality: at a perturbed point the certified gap is at least how far the point's
    objective is above the optimum (Boyd and Vandenberghe 2004, section 5.2; from memory)."""
    data = _iris()
    task = lo.classification(data, "species", loss="hinge").penalize(lo.penalty.l2(0.01))
    fit = task.solve()
    rng = np.random.default_rng(4)
    for size in (1e-3, 1e-2, 1e-1):
        step = rng.normal(size=_theta(fit).size) * size
        step[-3:] -= step[-3:].mean()                        # stay on the identified set
        cert = certify_classes(task, _theta(fit) + step)
        assert cert.gap >= cert.primal - fit.objective - 1e-9
        assert cert.gap > 0


@pytest.mark.parametrize("loss", [Multinomial(), MulticlassHinge()])
def test_fenchel_young_holds_for_the_class_losses(loss):
    """f(z) + f*(u) >= u.z for every u in the domain, with equality at u = the gradient
    (Fenchel-Young; common practice)."""
    rng = np.random.default_rng(1)
    Z = rng.normal(size=(200, 4)) * 2
    y = rng.integers(0, 4, 200)
    Y = one_hot(y, 4)
    Q = rng.dirichlet(np.ones(4), size=200)
    U = Q - Y
    assert np.all(loss.value(Z, y) + loss.conjugate(U, y) >= np.sum(U * Z, axis=1) - 1e-12)
    G = loss.gradient(Z, y)
    np.testing.assert_allclose(loss.value(Z, y) + loss.conjugate(G, y), np.sum(G * Z, axis=1), atol=1e-12)
    assert np.all(np.isinf(loss.conjugate(U + 0.5, y)))          # outside the simplex


def test_several_class_mistakes_are_named():
    data = _iris()
    with pytest.raises(lo.ParameterError, match="positive='setosa'.*3 labels"):
        lo.classification(data, "species", positive="setosa")
    with pytest.raises(lo.DataError, match="reference='daisy' is not a class"):
        lo.classification(data, "species", reference="daisy")
    two = data[data.species != "setosa"]
    with pytest.raises(lo.ParameterError, match="reference='versicolor'.*three or more labels"):
        lo.classification(two, "species", reference="versicolor")
    fit = lo.classification(data, "species", loss="hinge").penalize(lo.penalty.l2(0.1)).solve()
    with pytest.raises(lo.ParameterError, match="scores, not probabilities"):
        fit.probability(data)
    with pytest.raises(lo.ParameterError, match="total_variation.*not available"):
        lo.classification(data, "species").penalize(lo.penalty.total_variation(0.1, ["sepal_length", "sepal_width"]))
    with pytest.raises(lo.DataError, match="labels the fit does not know"):
        fit.evaluate(data.assign(species="daisy"))
    score = fit.evaluate(data)
    assert score["rows"] == 150 and 0.9 < score["accuracy"] <= 1.0


def test_weights_equal_repeated_rows():
    """Weight k equals k copies of the row (common practice)."""
    data = _iris().iloc[::3].reset_index(drop=True)
    w = np.arange(len(data)) % 3 + 1
    weighted = lo.classification(data.assign(w=w), "species", weights="w").penalize(lo.penalty.l2(0.01)).solve()
    repeated = lo.classification(data.loc[data.index.repeat(w)], "species").penalize(lo.penalty.l2(0.01)).solve()
    assert weighted.status == repeated.status == "optimal"
    assert abs(weighted.objective - repeated.objective) < 1e-10
    # an l2 strength of 0.01 leaves the optimum flat: 1e-7 in the gap allows ~1e-5 in coefficients
    np.testing.assert_allclose(weighted.coef.to_numpy(), repeated.coef.to_numpy(), atol=2e-5)


def test_the_newton_route_and_the_direct_route_agree():
    """Newton's method in numpy (the default for the multinomial loss with l2 penalties and no
    rules) and the whole program in Clarabel reach the same certified optimum."""
    data = _iris()
    task = lo.classification(data, "species").penalize(lo.penalty.l2(0.01, factors={"sepal_width": 0.0}))
    newton = task.solve()
    direct = task.solve(route="direct")
    assert (newton.route, direct.route) == ("newton", "direct")
    assert newton.status == direct.status == "optimal"
    assert abs(newton.objective - direct.objective) < 1e-9
    np.testing.assert_allclose(newton.coef.to_numpy(), direct.coef.to_numpy(), atol=2e-5)
    assert abs(newton.coef.loc["sepal_width"].sum()) < 1e-12        # unpenalised: sums to zero
    ref = lo.classification(data, "species", reference="setosa").penalize(lo.penalty.l2(0.01)).solve()
    assert ref.route == "newton" and ref.status == "optimal"
    with pytest.raises(lo.ParameterError, match="route='newton'\\): the multiclass hinge goes by smoothing.*no penalty"):
        lo.classification(data, "species", loss="hinge").solve(route="newton")


@pytest.mark.parametrize("make", [
    lambda t: t.penalize(lo.penalty.l1(0.01)),
    lambda t: t.penalize(lo.penalty.shared(0.02)),
    lambda t: t.penalize(lo.penalty.l2(0.01)).require("petal_width >= 0 for class 'versicolor'", "sepal_width <= 1"),
    lambda t: t.penalize(lo.penalty.elastic_net(0.02, 0.5)).require("mean(prediction where sepal_length > 6) <= 1"),
], ids=["l1", "shared", "l2+rules", "elastic_net+mean rule"])
def test_newton_steps_with_rules_and_penalties_agree_with_the_direct_route(make):
    """Newton steps that each solve a small program (rules, l1-type penalties) reach the optimum
    the whole program reaches in Clarabel, and price the rules alike."""
    task = make(lo.classification(_iris(), "species"))
    stepped, direct = task.solve(), task.solve(route="direct")
    assert (stepped.route, direct.route) == ("newton", "direct")
    assert stepped.status == direct.status == "optimal"
    assert abs(stepped.objective - direct.objective) <= 1e-8 * max(1.0, abs(direct.objective))
    for rule in direct.prices.index:
        assert stepped.prices[rule] == pytest.approx(direct.prices[rule], rel=1e-3, abs=1e-6)


def test_a_model_file_predicts_what_the_fit_did(tmp_path):
    """save / lo.load_fit: the same probabilities and labels (floats written in round-trip form),
    the evidence kept; a file edited by hand loads as unverified (common practice: a digest)."""
    import json

    data = _iris().assign(batch=lambda f: np.where(f.index % 2, "odd", "even"))
    fit = lo.classification(data, "species", reference="setosa").penalize(lo.penalty.l1(0.01)) \
        .require("sepal_width >= 0 for class 'virginica'").solve()
    fit.save(tmp_path / "m.json")
    back = lo.load_fit(tmp_path / "m.json")
    assert type(back).__name__ == "ClassesFit" and back.status == "optimal"
    assert back.identification == fit.identification and back.task.reference == "setosa"
    np.testing.assert_array_equal(back.probability(data).to_numpy(), fit.probability(data).to_numpy())
    assert (back.predict(data) == fit.predict(data)).all()
    assert [r.text for r in back.task.rules] == ["sepal_width >= 0 for class 'virginica'"]
    saved = json.loads((tmp_path / "m.json").read_text())
    saved["coef"]["1"][0] = 5.0
    (tmp_path / "edited.json").write_text(json.dumps(saved))
    assert lo.load_fit(tmp_path / "edited.json").status == "unverified"
    del saved["coef"]
    (tmp_path / "broken.json").write_text(json.dumps(saved))
    with pytest.raises(lo.DataError, match="not a whole fit with several classes"):
        lo.load_fit(tmp_path / "broken.json")


def test_rules_that_cannot_hold_together_are_infeasible_on_every_route():
    """The newton steps' small programs find no point; a solver confirms none exists (common
    practice: infeasibility is the solver's certificate, not a guess)."""
    data = _iris()
    task = lo.classification(data, "species").penalize(lo.penalty.l2(0.01)) \
        .require("sepal_width >= 1 for class 'setosa'", "sepal_width <= 0 for class 'setosa'")
    for route in (None, "direct"):
        fit = task.solve(route=route)
        assert fit.status == "infeasible" and "sepal_width >= 1 for class 'setosa'" in fit.message
    # under sum to zero, a bound above 0 on every class of an unpenalised feature cannot hold
    pinned = lo.classification(data, "species").require("sepal_width >= 1")
    assert pinned.solve().status == "infeasible"
    assert any("applies to every class" in note for note in pinned.check().data)


def test_what_several_classes_do_not_take_yet_is_refused_by_name():
    data = _iris()
    task = lo.classification(data, "species").penalize(lo.penalty.l2(0.01))
    for call, name in ((lambda: task.path(), "path()"), (lambda: task.cross_validate(), "cross_validate()"),
                       (lambda: task.compare(), "compare()"), (lambda: task.fit_by("species"), "fit_by()"),
                       (lambda: task.solve().bootstrap(10), "bootstrap()")):
        with pytest.raises(lo.ParameterError, match=re.escape(name)):
            call()
    with pytest.raises(lo.ParameterError, match="tol has to be between 0 and 1"):
        task.solve(tol=-1)
    with pytest.raises(lo.ParameterError, match="solver_options"):
        task.solve(solver="clarabel", solver_options={"bogus": 1})
    with pytest.raises(lo.DataError, match=r"shared: unknown features \['petals'\]"):
        lo.classification(data, "species").penalize(lo.penalty.shared(0.1, ["petals"]))
    two = data[data.species != "setosa"]
    with pytest.raises(lo.ParameterError, match="a rule for one class needs a target of three or more labels"):
        lo.classification(two, "species").require("sepal_width >= 0 for class 'virginica'")
    with pytest.raises(lo.ParameterError, match="for_class='virginica'"):
        lo.classification(two, "species").require("sepal_width >= 0", for_class="virginica")


def test_a_class_rule_names_a_numeric_label_as_written():
    frame = pd.DataFrame({"a": np.random.default_rng(0).normal(size=90), "y": np.array([1.0, 2.0, 3.0])[np.arange(90) % 3]})
    fit = lo.classification(frame, "y").penalize(lo.penalty.l2(0.1)).require("a >= 0.5 for class 2").solve()
    assert fit.status == "optimal" and fit.coef.loc["a", 2.0] == pytest.approx(0.5, abs=1e-7)


def test_the_adapter_reads_a_class_rule_by_label():
    """Integer labels 2, 5, 7: "for class 2" is the label 2, not the third class."""
    X, y = load_wine(return_X_y=True)
    X = (X - X.mean(axis=0)) / X.std(axis=0)
    labels = np.array([2, 5, 7])[y]
    model = lo.estimator("classification", "logistic", l2=0.01, rules=["x0 <= -0.1 for class 7"]).fit(X, labels)
    assert list(model.classes_) == [2, 5, 7]
    assert model.coef_[2, 0] == pytest.approx(-0.1, abs=1e-7) and model.coef_[0, 0] > 0
