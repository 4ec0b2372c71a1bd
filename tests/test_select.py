"""Paths and cross-validation, checked against published paths and reference libraries."""
import importlib.util

import re

import numpy as np
import pandas as pd
import pytest

import learnopt as lo
from learnopt.selection.crossval import fold_rows

DIABETES = ["age", "sex", "bmi", "bp", "s1", "s2", "s3", "s4", "s5", "s6"]


@pytest.fixture(scope="module")
def diabetes():
    from sklearn.datasets import load_diabetes
    X, y = load_diabetes(return_X_y=True)
    return X, y


def _lars_grid(X, y):
    """Strengths between consecutive lasso-path breakpoints, in learnopt's scaling (2 alpha)."""
    from sklearn.linear_model import lars_path
    alphas, _, _ = lars_path(X, y, method="lasso")
    mids = np.sqrt(alphas[:-1] * alphas[1:])
    return 2.0 * mids


def test_diabetes_lasso_path_entry_order_and_end_point(diabetes):
    # reference: Efron, Hastie, Johnstone, Tibshirani (2004), Least Angle Regression: on the
    # diabetes data the variables enter in the order 3, 9, 4, 7, 2, 10, 5, 8, 6, 1 (1-based) and
    # variable 7 leaves once and re-enters (order recalled from the paper, confirmed by
    # scikit-learn's lars_path); the end point is the least-squares fit (values: ../shared/REFERENCES.md)
    X, y = diabetes
    task = lo.regression(X, y, features=DIABETES)
    grid = np.append(_lars_grid(X, y), 0.0)
    path = task.path(lo.penalty.l1(1.0), grid=grid, progress=False)
    assert (path.table["status"] == "optimal").all()
    active = path.coefs.abs() > 1e-6 * path.coefs.abs().to_numpy().max()
    entered = []
    for _, row in active.iterrows():
        for name in DIABETES:
            if row[name] and name not in entered:
                entered.append(name)
    assert [DIABETES.index(n) + 1 for n in entered] == [3, 9, 4, 7, 2, 10, 5, 8, 6, 1]
    s3 = active["s3"].to_numpy()
    first = int(np.argmax(s3))
    assert (~s3[first:]).any() and s3[first:][np.argmax(~s3[first:]):].any()   # leaves, then re-enters
    end = path.fits[-1]
    ls = {"age": -10.0099, "sex": -239.8156, "bmi": 519.8459, "bp": 324.3846, "s1": -792.1756,
          "s2": 476.7390, "s3": 101.0433, "s4": 177.0632, "s5": 751.2737, "s6": 67.6267}
    for name, value in ls.items():
        assert end.coef[name] == pytest.approx(value, abs=1e-3)
    assert end.intercept == pytest.approx(152.1335, abs=1e-3)
    assert end.coef.abs().sum() == pytest.approx(3459.9776, abs=1e-2)


def test_default_grid_starts_where_every_coefficient_is_zero(diabetes):
    # the zeroing strength of the lasso is max |X'(y - ybar)| * 2 / n in learnopt's scaling
    # (common practice: the dual norm of the gradient at zero)
    X, y = diabetes
    path = lo.regression(X, y, features=DIABETES).path(lo.penalty.l1(1.0), n=10, progress=False)
    top = 2.0 * np.max(np.abs(X.T @ (y - y.mean()))) / len(y)
    assert path.table["strength"].iloc[0] == pytest.approx(top, rel=1e-9)
    assert path.table["nonzero"].iloc[0] == 0 and path.table["nonzero"].iloc[1] >= 1
    assert path.table["strength"].iloc[-1] == pytest.approx(top * 1e-3, rel=1e-9)
    assert list(path.coefs.columns) == DIABETES and len(path.fits) == 10


def test_path_objectives_match_scikit_learn_lasso_path(diabetes):
    # reference: scikit-learn lasso_path; its objective (1/2n)|r|^2 + alpha|w|_1 is half of
    # learnopt's mean r^2 + 2 alpha |w|_1 (centred data, as lasso_path fits no intercept)
    from sklearn.linear_model import lasso_path
    X, y = diabetes
    yc = y - y.mean()
    alphas, coefs, _ = lasso_path(X, yc, alphas=12, tol=1e-12, max_iter=100000)
    task = lo.regression(X, yc, features=DIABETES, intercept=False)
    path = task.path(lo.penalty.l1(1.0), grid=2 * alphas, progress=False)
    for k, alpha in enumerate(alphas):
        w = coefs[:, k]
        theirs = np.mean((yc - X @ w) ** 2) + 2 * alpha * np.abs(w).sum()
        assert path.table["objective"].iloc[k] == pytest.approx(theirs, rel=1e-7)
        # their point is feasible, so it cannot beat ours by more than our certified gap
        assert path.table["objective"].iloc[k] <= theirs + path.table["gap"].iloc[k] + 1e-12


def test_path_matches_glmnet_results_shipped_with_statsmodels():
    # reference: R glmnet results for the lasso (L1_wt = 1) in statsmodels'
    # regression/tests/results (glmnet_r_results.py, lasso_data.csv); glmnet minimises
    # (1/2n)|r|^2 + lam |w|_1 on standardised data without intercept, i.e. learnopt strength 2 lam
    import importlib
    from pathlib import Path
    res = importlib.import_module("statsmodels.regression.tests.results.glmnet_r_results")
    data = np.loadtxt(Path(res.__file__).parent / "lasso_data.csv", delimiter=",")
    checked = 0
    for name in dir(res):
        if not name.startswith("rslt_"):
            continue
        vec = getattr(res, name)
        n, p, l1_wt, lam = int(vec[0]), int(vec[1]), float(vec[2]), float(vec[3])
        if l1_wt != 1.0:
            continue
        y = data[:n, 0] - data[:n, 0].mean()
        y /= y.std(ddof=1)
        X = data[:n, 1:p + 1] - data[:n, 1:p + 1].mean(0)
        X /= X.std(0, ddof=1)
        path = lo.regression(X, y, intercept=False).path(lo.penalty.l1(1.0), grid=[2 * lam], progress=False)
        np.testing.assert_allclose(path.coefs.iloc[0].to_numpy(), vec[4:], atol=2e-6)
        checked += 1
    assert checked >= 9


def test_requirements_hold_along_the_path_and_in_every_fold(diabetes):
    X, y = diabetes
    df = pd.DataFrame(X, columns=DIABETES).assign(y=y)
    task = lo.regression(df, "y").require("bmi <= 300", "s5 >= 400", "prediction >= 50 where s5 > 0.05")
    path = task.path(lo.penalty.l1(1.0), n=15, progress=False)
    for fit in path.fits:
        assert fit.status == "optimal" and fit.violation <= 1e-6
        assert fit.coef["bmi"] <= 300 + 1e-6 and fit.coef["s5"] >= 400 - 1e-6
    cv = task.cross_validate(folds=3, n=6, penalty=lo.penalty.l1(1.0), progress=False)
    assert (cv.table["certified_folds"] == 3).all()


def test_fold_assignment_is_reproducible_and_matches_a_hand_computation():
    # hand computation of the documented rule: permute the rows with numpy's default_rng(seed),
    # cut the permutation into consecutive parts of sizes 2, 2, 2; each part is held out once
    perm = np.random.default_rng(0).permutation(6)
    expected = [sorted(perm[0:2]), sorted(perm[2:4]), sorted(perm[4:6])]
    folds = fold_rows(6, 3, seed=0)
    assert [t.tolist() for _, t in folds] == expected
    assert folds[0][0].tolist() == sorted(set(range(6)) - set(expected[0]))
    uneven = fold_rows(7, 3, seed=2)                      # sizes 3, 2, 2 (numpy.array_split)
    assert [len(t) for _, t in uneven] == [3, 2, 2]
    assert sorted(np.concatenate([t for _, t in uneven]).tolist()) == list(range(7))
    assert [t.tolist() for _, t in fold_rows(6, 3, seed=0)] == [t.tolist() for _, t in folds]
    groups = np.array(["a", "a", "b", "b", "c", "c", "d", "d"])
    for train, held in fold_rows(8, 2, seed=1, groups=groups):
        assert not set(groups[train]) & set(groups[held])
    ordered = fold_rows(9, 2, ordered=True)
    assert [(tr.tolist(), t.tolist()) for tr, t in ordered] == [([0, 1, 2], [3, 4, 5]), ([0, 1, 2, 3, 4, 5], [6, 7, 8])]
    with pytest.raises(lo.DataError, match="2 groups cannot fill 3 folds"):
        fold_rows(4, 3, groups=["a", "a", "b", "b"])


def test_cross_validation_picks_a_strength_and_its_one_se_neighbour(diabetes):
    X, y = diabetes
    task = lo.regression(X, y, features=DIABETES).penalize(lo.penalty.l1(1.0))
    cv = task.cross_validate(folds=5, n=12, progress=False)
    assert cv.top in cv.table["strength"].to_list() and cv.within_one_se >= cv.top
    row = cv.table.set_index("strength")
    assert row.loc[cv.within_one_se, "mean"] <= row.loc[cv.top, "mean"] + row.loc[cv.top, "se"]
    with pytest.warns(DeprecationWarning, match="cv.top"):
        assert cv.best == cv.top                               # the old names still work, and warn
    with pytest.warns(DeprecationWarning, match="cv.within_one_se"):
        assert cv.best_1se == cv.within_one_se
    assert cv.scores.shape == (12, 5) and cv.metric == "loss"
    mae = task.cross_validate(folds=5, n=12, metric="mae", progress=False)
    assert mae.metric == "mae" and np.all(mae.table["mean"] < 100)
    custom = task.cross_validate(folds=5, grid=[0.1, 1.0], metric=lambda yt, s: float(np.median(np.abs(yt - s))))
    assert len(custom.table) == 2
    with pytest.raises(lo.ParameterError, match="accuracy metric is for classification"):
        task.cross_validate(metric="accuracy")
    with pytest.raises(lo.ParameterError, match=r"cross_validate\(metric='rmsle'\): metric has to be one of loss, mse"):
        task.cross_validate(metric="rmsle")
    with pytest.raises(lo.ParameterError, match=r"cross_validate\(metric='pinball\(1.5\)'\): metric has to be "
                                                r"pinball\(tau\) with tau between 0 and 1"):
        task.cross_validate(metric="pinball(1.5)")


def test_classification_cross_validation_by_accuracy():
    from sklearn.datasets import load_breast_cancer
    X, y = load_breast_cancer(return_X_y=True)
    X = (X - X.mean(0)) / X.std(0)
    task = lo.classification(X[:, :8], y, loss="logistic").penalize(lo.penalty.l1(1.0))
    cv = task.cross_validate(folds=4, n=8, metric="accuracy", progress=False)
    assert cv.higher_is_better and cv.table["mean"].max() > 0.9
    row = cv.table.set_index("strength")
    assert row.loc[cv.top, "mean"] == cv.table["mean"].max()


def test_path_input_errors(diabetes):
    X, y = diabetes
    task = lo.regression(X, y)
    with pytest.raises(lo.ParameterError, match="needs a penalty to vary"):
        task.path()
    with pytest.raises(lo.ParameterError, match="never sets coefficients to zero"):
        task.path(lo.penalty.l2(1.0))
    ridge = task.path(lo.penalty.l2(1.0), grid=[1.0, 0.1, 0.0], progress=False)
    assert (ridge.table["status"] == "optimal").all()
    with pytest.raises(lo.ParameterError, match="grid"):
        task.path(lo.penalty.l1(1.0), grid=[-1.0])


@pytest.mark.skipif(importlib.util.find_spec("matplotlib") is None, reason="matplotlib not installed")
def test_plots_draw(diabetes):
    import matplotlib
    matplotlib.use("Agg")
    X, y = diabetes
    task = lo.regression(X, y, features=DIABETES).penalize(lo.penalty.l1(1.0))
    ax = task.path(n=5, progress=False).plot()
    assert sorted(t.get_text() for t in ax.texts) == sorted(DIABETES)       # every line named
    assert ax.get_xlim()[0] < ax.get_xlim()[1]                            # strength grows to the right
    cv = task.cross_validate(folds=3, n=4, progress=False)
    ax = cv.plot()
    # our own picture: strength increasing left to right, a shaded band, the choices labelled,
    # the non-zero counts in a panel underneath (the main axes share its x)
    lo_x, hi_x = ax.get_xlim()
    assert lo_x < hi_x and ax.get_xscale() == "log"
    assert len(ax.collections) == 1                                  # the plus/minus one se band
    labels = [t.get_text() for t in ax.texts]
    assert any(t.startswith("top score") for t in labels) and any(t.startswith("within one se") for t in labels)
    assert len(ax.figure.axes) == 2 and ax.figure.axes[1].get_xlabel() == "penalty strength"


def test_every_path_point_is_as_accurate_as_a_single_solve():
    # scikit-learn's diabetes data (an ill-conditioned design): each warm-started path point must
    # match a cold single solve at its strength, and scikit-learn's Lasso at a tight tolerance
    # (its alpha = strength / 2, common practice for the 1/(2n) scaling)
    from sklearn.datasets import load_diabetes
    from sklearn.linear_model import Lasso
    X, y = load_diabetes(return_X_y=True)
    path = lo.regression(X, y).penalize(lo.penalty.l1(1.0)).path(n=15)
    assert path.table["rel_gap"].max() <= 1e-12
    for strength, fit in zip(path.table["strength"], path.fits):
        single = lo.regression(X, y).penalize(lo.penalty.l1(strength)).solve()
        np.testing.assert_allclose(fit.coef.to_numpy(), single.coef.to_numpy(), rtol=0, atol=1e-8)
        ref = Lasso(alpha=strength / 2, tol=1e-14, max_iter=1_000_000).fit(X, y)
        np.testing.assert_allclose(fit.coef.to_numpy(), ref.coef_, rtol=0, atol=1e-5)


def test_default_path_end_is_read_from_the_data(diabetes):
    # scikit-learn's diabetes data: the path stops at the first decade below the zeroing
    # strength where a further decade lowered the training loss by at most 1% of its fall so far
    # (or where every coefficient is non-zero and the loss levelled off); checked with fits of our own
    X, y = diabetes
    task = lo.regression(X, y, features=DIABETES).penalize(lo.penalty.l1(1.0))
    walk = task.path(n=8, progress=False)
    top, end = walk.table["strength"].iloc[0], walk.table["strength"].iloc[-1]
    # the reason names the decade where the path stopped; the grid must end exactly there
    said = re.search(r"(\d+) (?:decade|below)", walk.stopped)
    assert said is not None, walk.stopped
    k = int(said.group(1))
    assert 1 <= k <= 6 and end == pytest.approx(top * 10.0 ** -k, rel=1e-12)
    fits = {j: task.path(grid=[top * 10.0 ** -j], progress=False).table["training_loss"].iloc[0] for j in (k - 1, k)}
    fall, step = walk.table["training_loss"].iloc[0] - fits[k], fits[k - 1] - fits[k]
    assert step <= 0.1 * fall                   # the weaker of the two stopping tests
    assert "as asked" in task.path(n=3, ratio=1e-2, progress=False).stopped
