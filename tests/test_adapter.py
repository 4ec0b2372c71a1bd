"""The scikit-learn adapter, checked by scikit-learn's own conformance suite and utilities."""
import numpy as np
import pytest

import learnopt as lo

sklearn = pytest.importorskip("sklearn")
from sklearn.datasets import load_breast_cancer, load_diabetes  # noqa: E402
from sklearn.linear_model import Lasso  # noqa: E402
from sklearn.model_selection import GridSearchCV, cross_val_score  # noqa: E402
from sklearn.pipeline import make_pipeline  # noqa: E402
from sklearn.preprocessing import StandardScaler  # noqa: E402
from sklearn.utils.estimator_checks import check_estimator  # noqa: E402

from learnopt.interface.adapter import expected_failed_checks  # noqa: E402


@pytest.mark.parametrize("est", [lo.estimator("regression"), lo.estimator("regression", l1=0.01),
                                 lo.estimator("classification"), lo.estimator("classification", "logistic"),
                                 lo.estimator("classification", "logistic", l2=0.01)],
                         ids=["squared", "squared+l1", "hinge", "logistic", "logistic+l2"])
def test_passes_scikit_learns_conformance_suite(est):
    # reference: scikit-learn's check_estimator (the estimator protocol's own conformance suite);
    # the only declared exceptions come from expected_failed_checks, each with its reason
    expected = expected_failed_checks(est)
    results = check_estimator(est, on_fail=None, expected_failed_checks=expected)
    failed = [(r["check_name"], str(r["exception"])[:300]) for r in results if r["status"] == "failed"]
    assert not failed
    assert all(len(reason) > 20 for reason in expected.values())


def test_matches_scikit_learn_lasso_inside_a_pipeline():
    # reference: scikit-learn Lasso(alpha) minimises (1/2n)|r|^2 + alpha|w|_1 = half of learnopt's
    # objective with l1 = 2 alpha; both after the same StandardScaler
    X, y = load_diabetes(return_X_y=True)
    ours = make_pipeline(StandardScaler(), lo.estimator("regression", l1=2 * 0.5)).fit(X, y)
    ref = make_pipeline(StandardScaler(), Lasso(alpha=0.5, tol=1e-12, max_iter=100000)).fit(X, y)
    np.testing.assert_allclose(ours[-1].coef_, ref[-1].coef_, atol=1e-4)
    assert ours[-1].fit_.status == "optimal"
    np.testing.assert_allclose(ours.predict(X[:5]), ref.predict(X[:5]), rtol=1e-6)


def test_grid_search_over_the_l1_strength_and_cross_val_score():
    X, y = load_diabetes(return_X_y=True)
    pipe = make_pipeline(StandardScaler(), lo.estimator("regression", rules=["x2 >= 0"]))
    search = GridSearchCV(pipe, {"regressor__l1": [0.01, 0.1, 1.0, 10.0]}, cv=3).fit(X, y)
    assert search.best_params_["regressor__l1"] in (0.01, 0.1, 1.0, 10.0)
    assert search.best_estimator_[-1].coef_[2] >= -1e-9
    scores = cross_val_score(lo.estimator("regression", l1=0.1), X, y, cv=3)
    assert scores.shape == (3,) and np.all(scores > 0.3)


def test_classifier_labels_probabilities_and_dataframe_names():
    data = load_breast_cancer(as_frame=True)
    X = data.data.iloc[:, :6]
    y = np.where(data.target == 1, "benign", "malignant")
    model = make_pipeline(StandardScaler().set_output(transform="pandas"),
                          lo.estimator("classification", "logistic", l2=1e-3, rules=["`mean radius` <= 0"]))
    model.fit(X, y)
    est = model[-1]
    assert list(est.classes_) == ["benign", "malignant"]
    assert list(est.feature_names_in_) == list(X.columns)
    assert est.coef_[0] <= 1e-9
    proba = model.predict_proba(X)
    assert proba.shape == (len(X), 2) and np.allclose(proba.sum(axis=1), 1.0)
    assert set(model.predict(X)) <= {"benign", "malignant"} and model.score(X, y) > 0.85
    assert not hasattr(lo.estimator("classification"), "predict_proba")   # hinge: no probabilities


def test_adapter_errors_are_clear():
    X, y = np.random.default_rng(0).normal(size=(20, 2)), np.arange(20.0)
    with pytest.raises(lo.ParameterError, match=r"Regressor\(l1=-1.0\): l1 has to be at least 0"):
        lo.estimator("regression", l1=-1.0).fit(X, y)
    with pytest.raises(lo.ParameterError, match=r"estimator\(kind='ranking'\): kind has to be one of 'regression', 'classification'"):
        lo.estimator("ranking")
    with pytest.raises(lo.LearnoptError, match="infeasible"):
        lo.estimator("regression", rules=["x0 >= 1", "x0 <= 0"]).fit(X, y)
    with pytest.raises(lo.ParameterError, match="loss='squared_hinge' with the target array of 3 labels"):
        lo.estimator("classification", "squared_hinge").fit(X, np.arange(20) % 3)
    with pytest.raises(ValueError, match="continuous"):
        lo.estimator("classification").fit(X, np.linspace(0, 1, 20))


def test_several_classes_match_scikit_learn_logistic_regression_on_wine():
    """reference: scikit-learn LogisticRegression (multinomial, lbfgs) after the same
    StandardScaler, C = 1/(2 n lam); coef_ (classes x features), probabilities and labels agree."""
    from sklearn.datasets import load_wine
    from sklearn.linear_model import LogisticRegression

    X, y = load_wine(return_X_y=True)
    names = np.array(["barolo", "grignolino", "barbera"])[y]
    lam = 0.01
    ours = make_pipeline(StandardScaler(), lo.estimator("classification", "logistic", l2=lam)).fit(X, names)
    ref = make_pipeline(StandardScaler(), LogisticRegression(C=1 / (2 * len(X) * lam), tol=1e-12,
                                                             max_iter=100_000)).fit(X, names)
    assert list(ours[-1].classes_) == list(ref[-1].classes_)
    assert ours[-1].coef_.shape == (3, 13) and ours[-1].fit_.status == "optimal"
    np.testing.assert_allclose(ours[-1].coef_, ref[-1].coef_, atol=1e-5)
    np.testing.assert_allclose(ours.predict_proba(X), ref.predict_proba(X), atol=1e-6)
    assert (ours.predict(X) == ref.predict(X)).all()
    assert cross_val_score(lo.estimator("classification", "hinge", l2=0.01), X / X.std(axis=0), y, cv=3).min() > 0.85
