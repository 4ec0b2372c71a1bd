"""An adapter that speaks scikit-learn's estimator protocol, for pipelines and grid searches.

learnopt's own front door stays ``lo.regression`` / ``lo.classification``; this module lets a
learnopt task sit where a scikit-learn estimator is expected (``Pipeline``, ``GridSearchCV``,
``cross_val_score``). It needs scikit-learn (``pip install 'learnopt[sklearn]'``).

Feature names: with a DataFrame the columns' names; with an array x0, x1, ... Rules name these.
Inside a Pipeline the adapter sees the *transformed* matrix (after a scaler, say), so rules and
coefficients refer to the scaled features.
"""
from __future__ import annotations

import numpy as np
from scipy.special import expit, softmax

from learnopt.core import checks as params
from learnopt.core.errors import LearnoptError, MissingDependencyError
from learnopt.interface.task import classification, regression
from learnopt.solve.classes_fit import ClassesFit
from learnopt.terms import penalties as pen

try:
    from sklearn.base import BaseEstimator, ClassifierMixin, RegressorMixin
    from sklearn.utils.metaestimators import available_if
    from sklearn.utils.multiclass import check_classification_targets, type_of_target
    from sklearn.utils.validation import check_is_fitted, validate_data
except ImportError as exc:  # pragma: no cover - exercised only without scikit-learn
    raise MissingDependencyError("lo.estimator needs scikit-learn: pip install 'learnopt[sklearn]'.") from exc


class _Base(BaseEstimator):
    """Shared fitting: build the learnopt task from the constructor's parameters and solve it."""

    _kind = "regression"

    def __init__(self, loss="squared", *, l1: float = 0.0, l2: float = 0.0, penalties=(), rules=(),
                 intercept: bool = True, solver=None, tol: float = 1e-9, route=None):
        self.loss = loss
        self.l1 = l1
        self.l2 = l2
        self.penalties = penalties
        self.rules = rules
        self.intercept = intercept
        self.solver = solver
        self.tol = tol
        self.route = route

    def _task(self, X, y, sample_weight):
        names = [str(c) for c in self.feature_names_in_] if hasattr(self, "feature_names_in_") \
            else [f"x{j}" for j in range(X.shape[1])]
        build = regression if self._kind == "regression" else classification
        task = build(X, y, loss=self.loss, features=names, weights=sample_weight, intercept=self.intercept)
        extra = []
        params.check(type(self).__name__, l1=(self.l1, params.NONNEGATIVE), l2=(self.l2, params.NONNEGATIVE))
        for name in ("l1", "l2"):
            value = getattr(self, name)
            if value > 0:
                extra.append(getattr(pen, name)(float(value)))
        task = task.penalize(*extra, *tuple(self.penalties))
        if self.rules:
            task = task.require(*tuple(self.rules))
        return task

    def _solve(self, task):
        fit = task.solve(self.solver, tol=self.tol, route=self.route)
        if not fit.status.has_point:
            raise LearnoptError(f"The fit ended {fit.status!r}: {fit.message}")
        self.fit_ = fit
        if isinstance(fit, ClassesFit):          # several classes: one row per class, as scikit-learn
            self.coef_ = fit.coef.to_numpy().T.copy()
            self.intercept_ = fit.intercept.to_numpy().copy()
        else:
            self.coef_ = fit.coef.to_numpy().copy()
            self.intercept_ = float(fit.intercept)
        return self

    def _score_rows(self, X):
        check_is_fitted(self, "fit_")
        X = validate_data(self, X, accept_sparse=("csr", "csc"), dtype=np.float64, reset=False)
        if np.ndim(self.coef_) == 2:
            return np.asarray(X @ self.coef_.T) + self.intercept_
        return np.asarray(X @ self.coef_).ravel() + self.intercept_

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.input_tags.sparse = True
        return tags


class Regressor(RegressorMixin, _Base):
    """A learnopt regression task as a scikit-learn regressor (see :func:`estimator`)."""

    _kind = "regression"

    def fit(self, X, y, sample_weight=None):
        X, y = validate_data(self, X, y, accept_sparse=("csr", "csc"), dtype=np.float64, y_numeric=True)
        return self._solve(self._task(X, y, sample_weight))

    def predict(self, X):
        return self._score_rows(X)


class Classifier(ClassifierMixin, _Base):
    """A learnopt classification task as a scikit-learn classifier (see :func:`estimator`).

    Two classes: ``classes_[1]`` is the positive class (+1); ``decision_function`` > 0 predicts
    it. Three or more: the multinomial loss (logistic) or the multiclass hinge (hinge), with
    ``coef_`` of shape (classes, features) and scores per class (sum-to-zero identification).
    """

    _kind = "classification"

    def __init__(self, loss="hinge", *, l1: float = 0.0, l2: float = 0.0, penalties=(), rules=(),
                 intercept: bool = True, solver=None, tol: float = 1e-9, route=None):
        super().__init__(loss, l1=l1, l2=l2, penalties=penalties, rules=rules, intercept=intercept,
                         solver=solver, tol=tol, route=route)

    def fit(self, X, y, sample_weight=None):
        X, y = validate_data(self, X, y, accept_sparse=("csr", "csc"), dtype=np.float64)
        check_classification_targets(y)
        kind = type_of_target(y, input_name="y", raise_unknown=True)
        if kind not in ("binary", "multiclass"):
            raise ValueError(f"learnopt classifies a target of one label per row; the type of the target is {kind}.")
        self.classes_ = np.unique(y)
        if len(self.classes_) < 2:
            raise ValueError(f"learnopt classifies two or more classes; the target has 1 class "
                             f"({self.classes_.tolist()}).")
        if len(self.classes_) > 2:                # several classes: the labels themselves (rules name them)
            self._solve(self._task(X, y, sample_weight))
            order = [list(self.fit_.labels).index(v) for v in self.classes_]
            self.coef_, self.intercept_ = self.coef_[order], self.intercept_[order]
            return self
        signed = np.where(y == self.classes_[1], 1, 0)
        return self._solve(self._task(X, signed, sample_weight))

    def decision_function(self, X):
        """Scores: one per row (two classes: > 0 predicts classes_[1]) or one per row and class."""
        return self._score_rows(X)

    def predict(self, X):
        check_is_fitted(self, "fit_")
        scores = self.decision_function(X)
        if scores.ndim == 2:
            return self.classes_[scores.argmax(axis=1)]
        return self.classes_[(scores > 0).astype(int)]

    def _is_logistic(self):
        return self.loss == "logistic" or getattr(self.loss, "name", None) == "logistic"

    @available_if(_is_logistic)
    def predict_proba(self, X):
        """Class probabilities per row, in classes_ order; only for loss='logistic' (two classes:
        the logistic function of the score; several: the softmax of the scores)."""
        scores = self.decision_function(X)
        if scores.ndim == 2:
            return softmax(scores, axis=1)
        p = expit(scores)
        return np.column_stack([1.0 - p, p])

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.classifier_tags.multi_class = True
        return tags


def expected_failed_checks(est) -> dict[str, str]:
    """scikit-learn conformance checks that cannot hold for this estimator, each with the reason.

    Pass to ``check_estimator(est, expected_failed_checks=...)``. Only checks that test for a
    unique optimum on data where none exists are listed; every other check must pass.
    """
    reasons = {}
    if est.l1 == 0 and est.l2 == 0 and not est.penalties:
        why = ("an unpenalised fit on the check's data has no unique optimum (fewer distinct rows "
               "than coefficients, or separable classes), so two certified optima may predict differently")
        reasons["check_sample_weight_equivalence_on_dense_data"] = why
        reasons["check_sample_weight_equivalence_on_sparse_data"] = why
    return reasons


def estimator(kind: str = "regression", loss=None, *, l1: float = 0.0, l2: float = 0.0, penalties=(),
              rules=(), intercept: bool = True, solver=None, tol: float = 1e-9, route=None):
    """A scikit-learn compatible estimator around a learnopt task.

    Parameters
    ----------
    kind : "regression" or "classification" (two classes, or several with the logistic or hinge loss).
    loss : a loss name or object (default: squared for regression, hinge for classification).
    l1, l2 : strengths of l1 / l2 penalties on every coefficient (grid-searchable:
        ``set_params(l1=0.1)``, or ``model__l1`` inside a Pipeline).
    penalties : further learnopt penalty objects; rules : rule texts or rule objects.
    intercept, solver, tol, route : as in ``task.solve``.

    Examples
    --------
    >>> import numpy as np, learnopt as lo
    >>> X = np.random.default_rng(0).normal(size=(50, 3)); y = X @ [1.0, -2.0, 0.5] + 1
    >>> model = lo.estimator("regression", l1=0.01, rules=["x0 <= 0.8"]).fit(X, y)
    >>> round(float(model.coef_[0]), 6), model.fit_.status
    (0.8, 'optimal')
    """
    if kind == "regression":
        return Regressor("squared" if loss is None else loss, l1=l1, l2=l2, penalties=penalties, rules=rules,
                         intercept=intercept, solver=solver, tol=tol, route=route)
    if kind == "classification":
        return Classifier("hinge" if loss is None else loss, l1=l1, l2=l2, penalties=penalties, rules=rules,
                          intercept=intercept, solver=solver, tol=tol, route=route)
    raise params.refusal("estimator", "kind", kind, params.OneOf(("regression", "classification")).describe())
