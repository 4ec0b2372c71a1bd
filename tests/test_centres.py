"""Constrained centres, checked against published k-means values, scikit-learn and closed forms."""
import numpy as np
import pandas as pd
import pytest

import learnopt as lo


def _blobs(seed, n=600, k=4, d=2):
    rng = np.random.default_rng(seed)
    centres = rng.uniform(-10, 10, size=(k, d))
    return centres[rng.integers(0, k, n)] + rng.normal(size=(n, d))


def test_iris_best_within_cluster_sum_of_squares():
    # reference: R kmeans on iris (4 features), k = 3: 78.85144 = 15.15100 + 39.82097 + 23.87947,
    # sizes 50/62/38 (quoted in a public Q&A); scikit-learn KMeans agrees
    from sklearn.datasets import load_iris
    fit = lo.centres(load_iris().data, k=3).solve(restarts=10, seed=0)
    assert fit.objective == pytest.approx(78.85144, abs=5e-6)
    assert sorted(fit.loads["points"]) == [38, 50, 62]
    assert fit.status == "local optimum" and "not a convex problem" in fit.message
    per_cluster = sorted(float(np.sum((load_iris().data[fit.labels == j] - fit.centres.loc[j].to_numpy()) ** 2))
                         for j in fit.centres.index)
    np.testing.assert_allclose(per_cluster, [15.15100, 23.87947, 39.82097], atol=5e-5)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_unconstrained_matches_or_beats_scikit_learn(seed):
    # reference: scikit-learn KMeans (k-means++, 10 inits); our best restart is at least as good
    from sklearn.cluster import KMeans
    X = _blobs(seed)
    ours = lo.centres(X, k=4).solve(restarts=10, seed=seed)
    theirs = KMeans(4, n_init=10, random_state=seed).fit(X)
    assert ours.objective <= theirs.inertia_ * (1 + 1e-9)


def test_centre_step_is_the_projection_of_the_weighted_mean():
    # independent closed forms (common practice): for one centre the answer is the projection of
    # the weighted mean onto the allowed set - a clip for a box, a shift along the normal for a half-plane
    rng = np.random.default_rng(3)
    X = rng.normal(loc=[2.0, 1.0], size=(200, 2))
    w = rng.uniform(0.5, 2.0, 200)
    mean = w @ X / w.sum()
    box = lo.centres(X, k=1, weights=w).require("0 <= x0 <= 1", "x1 <= 0.5").solve(restarts=1)
    np.testing.assert_allclose(box.centres.loc[1].to_numpy(), np.clip(mean, [0, -np.inf], [1, 0.5]), atol=1e-8)
    a, b = np.array([1.0, 1.0]), 1.0
    half = lo.centres(X, k=1, weights=w).require("x0 + x1 <= 1").solve(restarts=1)
    expected = mean - max(0.0, a @ mean - b) / (a @ a) * a
    np.testing.assert_allclose(half.centres.loc[1].to_numpy(), expected, atol=1e-8)
    assert half.objective == pytest.approx(float(w @ np.sum((X - expected) ** 2, axis=1)), rel=1e-10)


def test_regions_per_centre_rules_and_fixed_centres():
    X = _blobs(4, n=800)
    square = lo.rule.polygon([(-5, -5), (5, -5), (5, 5), (-5, 5)], features=("x0", "x1"))
    fit = (lo.centres(X, k=4, fixed=[(9.0, 9.0)])
           .require(square, "centre 2: x0 <= -1", lo.rule.ball((0, 0), 3, features=("x0", "x1")),
                    "centre 4: x1 >= 0")
           .solve(restarts=5))
    C = fit.centres
    assert tuple(C.loc[1]) == (9.0, 9.0)                          # the existing centre stays put
    movable = C.loc[2:]
    assert (movable.abs().to_numpy() <= 5 + 1e-7).all()
    assert (np.linalg.norm(movable.to_numpy(), axis=1) <= 3 + 1e-7).all()
    assert C.loc[2, "x0"] <= -1 + 1e-7 and C.loc[4, "x1"] >= -1e-7
    assert fit.violation <= 1e-7 and len(fit.restarts) == 5
    road = lo.centres(X, k=2).require("centre 1: x0 >= 0",
                                      lo.rule.segment((-4, -4), (4, 4), features=("x0", "x1"))).solve()
    on = road.centres.to_numpy()
    np.testing.assert_allclose(on[:, 0], on[:, 1], atol=1e-7)     # both on the diagonal road
    assert (np.abs(on) <= 4 + 1e-7).all()


def test_non_convex_requests_are_refused_with_an_alternative():
    X = _blobs(5)
    with pytest.raises(lo.NotConvexError, match="turns the other way at vertex 2"):
        lo.centres(X, k=2).require(lo.rule.polygon([(0, 0), (4, 0), (2, 1), (4, 4), (0, 4)], features=("x0", "x1")))
    with pytest.raises(lo.NotConvexError, match="outside a region is not convex"):
        lo.rule.outside(lo.rule.ball((0, 0), 1))
    with pytest.raises(lo.NotConvexError, match="minimum separation between centres is not convex"):
        lo.rule.separation(2.0)
    with pytest.raises(lo.NotConvexError):
        lo.centres(X, k=2).require("norm2(x0, x1) >= 1")


def test_weights_equal_repeated_points_and_new_points():
    # common practice: a demand weight k is the same as k copies of the point
    X = _blobs(6, n=150)
    w = np.random.default_rng(0).integers(1, 4, 150).astype(float)
    weighted = lo.centres(X, k=3, weights=w).solve(restarts=20, seed=1)
    copies = lo.centres(np.repeat(X, w.astype(int), axis=0), k=3).solve(restarts=20, seed=1)
    assert weighted.objective == pytest.approx(copies.objective, rel=1e-9)
    df = pd.DataFrame(X, columns=["east_km", "north_km"]).assign(demand=w)
    fit = lo.centres(df, k=3, weights="demand").solve(restarts=5)
    assert list(fit.centres.columns) == ["east_km", "north_km"]
    assert fit.loads["weight"].sum() == pytest.approx(w.sum())
    new = pd.DataFrame({"east_km": [0.0, 5.0], "north_km": [0.0, -5.0]})
    assert set(fit.assign(new)) <= {1, 2, 3}
    ev = fit.evaluate(df, weights=w)
    assert ev["objective"] == pytest.approx(fit.objective, rel=1e-9)


def test_bad_input():
    X = _blobs(7, n=10)
    with pytest.raises(lo.ParameterError, match="k = 20 is more than the 10 points"):
        lo.centres(X, k=20)
    with pytest.raises(lo.DataError, match="weights must be"):
        lo.centres(X, k=2, weights=-np.ones(10))
    with pytest.raises(lo.DataError, match="not numeric"):
        lo.centres(pd.DataFrame({"a": list("xyzxyzxyzx"), "b": range(10)}), k=2, features=["a", "b"])
    with pytest.raises(lo.DataError, match="centres are numbered 1 to 2"):
        lo.centres(X, k=2).require("centre 3: x0 >= 0")
    with pytest.raises(lo.DataError, match="names"):
        lo.centres(X, k=2).require(lo.rule.ball((0, 0), 1, features=("lat", "lon")))


# ------------------------------------------------------------------ convex clustering
def test_fusion_identities():
    # identities from the optimality conditions (common practice in the convex-clustering
    # literature): the fused centres average to the data mean at every strength; with all pairs
    # and unit weights every point fuses once strength >= max_ij ||x_i - x_j|| / n (then
    # V_ij = (x_j - x_i) / n is dual feasible); each solve is certified
    rng = np.random.default_rng(0)
    X = np.r_[rng.normal(size=(15, 2)), rng.normal(size=(15, 2)) + 6]
    task = lo.fusion(X, 0.0, pairs="all")
    threshold = np.max(np.linalg.norm(X[:, None] - X[None], axis=2)) / len(X)
    for lam in (0.01, 0.1, 0.5 * threshold, 1.001 * threshold):
        fit = lo.fusion(X, lam, pairs="all").solve()
        assert fit.status == "optimal" and fit.rel_gap <= 1e-7
        np.testing.assert_allclose(fit.centres.mean().to_numpy(), X.mean(axis=0), atol=1e-7)
    assert fit.clusters == 1
    table = task.path([0.001, 0.05, 0.5 * threshold, 1.001 * threshold])
    assert list(table["clusters"]) == sorted(table["clusters"], reverse=True)
    assert table["clusters"].iloc[0] == 30 and table["clusters"].iloc[-1] == 1


def test_fusion_keeps_the_order_in_one_dimension():
    # identity (common practice): in 1-D the fused values keep the data order at every strength
    x = np.sort(np.random.default_rng(2).normal(size=25))
    for lam in (0.005, 0.02, 0.05, 0.2):
        u = lo.fusion(x, lam, pairs="all").solve().centres["x0"].to_numpy()
        assert np.all(np.diff(u) >= -1e-7)


def test_fusion_input_errors():
    with pytest.raises(lo.ParameterError, match=r"fusion\(pairs='ring'\): pairs has to be one of 'knn', 'all'"):
        lo.fusion(np.eye(3), 0.1, pairs="ring")
    with pytest.raises(lo.ParameterError, match=r"fusion\(strength=-1.0\): strength has to be at least 0"):
        lo.fusion(np.eye(3), -1.0)
    with pytest.raises(lo.DataError, match="at least two points"):
        lo.fusion(np.array([[np.nan, 1.0], [0.0, 1.0]]), 0.1)


def test_depot_demo_keeps_its_rules():
    from learnopt.interface.demo import depots
    fit = depots()
    c = fit.centres
    assert tuple(c.loc[1]) == (0.5, 0.5)
    assert c.loc[2, "north_km"] == pytest.approx(3.0, abs=1e-7) and 0 <= c.loc[2, "east_km"] <= 7.2 + 1e-7
    assert fit.violation <= 1e-7 and fit.status == "local optimum"
