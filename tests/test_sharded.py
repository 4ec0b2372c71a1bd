"""Sharded fits on a local dask cluster of 2 worker processes: the same answer and the same
certificate as the in-memory fit, from Parquet files, CSV files and dask DataFrames.

Outside references: the NIST StRD certified Longley values, the Stata values for the Spector
logistic MLE (both as listed in ../shared/REFERENCES.md), numpy's lstsq on scikit-learn's
diabetes data; otherwise the in-memory fit, itself checked against references elsewhere.
"""
from __future__ import annotations

import os
import threading
import time

import numpy as np
import pandas as pd
import pytest

import learnopt as lo
from learnopt.scale.cluster import ClusterSettings
from learnopt.solve.routes.base import Settings
from learnopt.core.errors import DataError, ParameterError
from learnopt.interface.recipes import load_recipe

dd = pytest.importorskip("dask.dataframe")
distributed = pytest.importorskip("distributed")
pytest.importorskip("pyarrow")


@pytest.fixture(scope="module")
def client():
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                       dashboard_address=":0", silence_logs=50)
    c = distributed.Client(cluster, set_as_default=False)
    yield c
    c.close()
    cluster.close()


def write_parts(frame: pd.DataFrame, folder, parts: int, kind: str = "parquet") -> str:
    """Split a frame into ``parts`` files; return the glob pattern."""
    for k, rows in enumerate(np.array_split(np.arange(len(frame)), parts)):
        piece = frame.iloc[rows]
        if kind == "parquet":
            piece.to_parquet(folder / f"part{k:02d}.parquet", index=False)
        else:
            piece.to_csv(folder / f"part{k:02d}.csv", index=False)
    return str(folder / f"*.{kind}")


def rel(a, b):
    return abs(a - b) / max(1.0, abs(b))


def make_classes(n=3000, d=5, seed=1):
    """Invented two-class data with a text column (demo-style data, checked against the in-memory fit)."""
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, d))
    s = X @ np.linspace(1.0, -1.0, d) + 0.3 + rng.normal(size=n)
    frame = pd.DataFrame(X, columns=[f"f{j}" for j in range(d)])
    frame["site"] = rng.choice(["harbour", "mill", "quarry"], size=n)
    frame["label"] = np.where(s > 0, "late", "on time")
    return frame


# ---- squared loss: exact reduction

def test_diabetes_least_squares_equals_lstsq(client, tmp_path):
    # scikit-learn's diabetes data in 5 Parquet files; reference: numpy lstsq on all rows
    from sklearn.datasets import load_diabetes
    data = load_diabetes(as_frame=True).frame
    pattern = write_parts(data, tmp_path, 5)
    fit = lo.regression(pattern, target="target").solve(client=client)
    M = np.column_stack([data.drop(columns="target").to_numpy(), np.ones(len(data))])
    ref = np.linalg.lstsq(M, data["target"].to_numpy(), rcond=None)[0]
    assert fit.status == "optimal" and fit.route == "sharded"
    np.testing.assert_allclose(fit.theta, ref, rtol=1e-10, atol=1e-8)
    assert fit.extras["partitions"] == 5 and fit.extras["method"] == "gram"
    # the least-squares end point from REFERENCES.md (Efron et al. 2004 data, values computed)
    assert np.sum(np.abs(fit.coef.to_numpy())) == pytest.approx(3459.9776, abs=1e-3)


def test_squared_with_penalty_and_rules_equals_in_memory(client, tmp_path):
    from sklearn.datasets import load_diabetes
    data = load_diabetes(as_frame=True).frame
    pattern = write_parts(data, tmp_path, 4)
    build = lambda d: (lo.regression(d, target="target").penalize(lo.penalty.l1(0.5))  # noqa: E731
                       .require("bmi <= 400", "s1 + s2 == 0", "bp >= 0"))
    fit = build(pattern).solve(client=client)
    ref = build(data).solve()
    assert fit.status == ref.status == "optimal"
    assert rel(fit.objective, ref.objective) <= 1e-10          # issue target: same optimum to 1e-10
    np.testing.assert_allclose(fit.theta, ref.theta, atol=1e-6 * np.abs(ref.theta).max())
    assert fit.gap <= 1e-7 * max(1, abs(fit.objective))
    pd.testing.assert_series_equal(fit.binding, ref.binding)
    np.testing.assert_allclose(fit.prices.to_numpy(), ref.prices.to_numpy(), rtol=1e-4, atol=1e-6)


def test_longley_by_tsqr_reaches_certified_values(client, tmp_path):
    # NIST StRD certified values (REFERENCES.md); the Gram matrix is too ill-conditioned, so the
    # route switches to a tall-skinny QR over the partitions
    sm = pytest.importorskip("statsmodels.api")
    data = sm.datasets.longley.load_pandas().data
    pattern = write_parts(data, tmp_path, 3)
    fit = lo.regression(pattern, target="TOTEMP").solve(client=client)
    certified = {"GNPDEFL": 15.0618722713733, "GNP": -0.0358191792925910, "UNEMP": -2.02022980381683,
                 "ARMED": -1.03322686717359, "POP": -0.0511041056535807, "YEAR": 1829.15146461355}
    assert fit.extras["factor"] == "qr"
    for name, value in certified.items():
        assert fit.coef[name] == pytest.approx(value, rel=1e-7), name
    assert fit.intercept == pytest.approx(-3482258.63459582, rel=1e-7)


def test_csv_glob_and_text_levels_spread_over_files(client, tmp_path):
    # a level that occurs in one file only must still get its column, in the in-memory order
    rng = np.random.default_rng(3)
    frame = pd.DataFrame({"size": rng.uniform(1, 5, 600), "area": np.repeat(["east", "north", "west"], 200)})
    frame["price"] = 2.0 * frame["size"] + frame["area"].map({"east": 0.0, "north": 1.0, "west": -1.0}) \
        + rng.normal(scale=0.1, size=600)
    pattern = write_parts(frame, tmp_path, 3, kind="csv")
    task = lo.regression(pattern, target="price")
    ref = lo.regression(frame, target="price").solve()
    assert task.features == ref.task.features == ("size", "area.north", "area.west")
    fit = task.solve(client=client)
    assert rel(fit.objective, ref.objective) <= 1e-10
    # predictions on new pandas data use the same encoding
    np.testing.assert_allclose(fit.predict(frame.head(5)).to_numpy(), ref.predict(frame.head(5)).to_numpy(),
                               rtol=1e-9)


def test_dask_dataframe_with_weights(client):
    frame = make_classes(2000)
    frame["w"] = np.random.default_rng(4).integers(1, 4, len(frame)).astype(float)
    frame["y"] = frame["f0"] * 2 - frame["f1"] + np.random.default_rng(5).normal(size=len(frame))
    source = dd.from_pandas(frame.drop(columns="label"), npartitions=3)
    fit = lo.regression(source, target="y", weights="w").solve(client=client)
    ref = lo.regression(frame.drop(columns="label"), target="y", weights="w").solve()
    assert fit.extras["partitions"] == 3
    assert rel(fit.objective, ref.objective) <= 1e-10
    np.testing.assert_allclose(fit.theta, ref.theta, rtol=1e-9, atol=1e-10)


def test_rules_on_mean_and_sum_of_predictions_compile_exactly(client):
    # a mean/sum of predictions is linear in the coefficients: one pass sums its rows, and the
    # compiled rule equals the in-memory one (reference: the in-memory rule compiler)
    frame = make_classes(3000).drop(columns="label")
    frame["y"] = frame["f0"] * 2 - frame["f1"] + (frame["site"] == "mill") * 1.5 \
        + np.random.default_rng(5).normal(size=len(frame))
    rules = ["mean(prediction where site == 'mill') - mean(prediction where site == 'quarry') <= 0.5",
             "sum(prediction where f0 > 1) / 100 >= 5",
             "abs(mean(prediction where site == 'harbour') - 1) <= 0.2",
             "f1 >= -0.9"]
    task = lo.regression(dd.from_pandas(frame, npartitions=4), target="y").require(*rules)
    ref = lo.regression(frame, target="y").require(*rules)
    assert [r.text for r in task.requirements] == [r.text for r in ref.requirements]
    for a, b in zip(task.requirements, ref.requirements):
        assert a.sense == b.sense
        np.testing.assert_allclose(a.A, b.A, rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(a.rhs, b.rhs, rtol=1e-12, atol=1e-12)
    fit, reference = task.solve(client=client), ref.solve()
    assert fit.status == reference.status == "optimal"
    assert rel(fit.objective, reference.objective) <= 1e-10
    pd.testing.assert_series_equal(fit.binding, reference.binding)
    np.testing.assert_allclose(fit.prices[reference.prices.index].to_numpy(), reference.prices.to_numpy(),
                               rtol=1e-5, atol=1e-8)


def test_rules_row_by_row_hold_inside_the_partitions(client):
    # each partition applies the rule to its own rows in its ADMM step; reference: in-memory fit
    frame = make_classes(1200).drop(columns="label")
    frame["y"] = frame["f0"] * 2 - frame["f1"] + (frame["site"] == "mill") * 1.5 \
        + np.random.default_rng(5).normal(size=len(frame))
    rules = ["prediction <= 2 where f0 > 1.5", "f1 >= -0.9"]
    build = lambda d: lo.regression(d, target="y").penalize(lo.penalty.l2(0.01)).require(*rules)  # noqa: E731
    task = build(dd.from_pandas(frame, npartitions=3))
    assert task.row_rules == ("prediction <= 2 where f0 > 1.5",) and len(task.requirements) == 1
    fit, ref = task.solve(client=client), build(frame).solve()
    assert fit.status == ref.status == "optimal" and fit.extras["method"] == "admm"
    assert fit.violation <= 1e-6 * 3
    assert rel(fit.objective, ref.objective) <= 1e-6
    assert fit.binding.to_dict() == ref.binding.to_dict()
    np.testing.assert_allclose(fit.prices[ref.prices.index].to_numpy(), ref.prices.to_numpy(), rtol=1e-3, atol=1e-6)
    # the rule holds on every row it selects (checked on the full frame, in memory)
    assert (fit.predict(frame)[frame["f0"] > 1.5] <= 2 + 1e-5).all()


def test_rules_row_by_row_errors(client):
    frame = make_classes(600).drop(columns="label")
    frame["y"] = frame["f0"]
    task = lo.regression(dd.from_pandas(frame, npartitions=3), target="y")
    with pytest.raises(DataError, match="mixes predictions row by row with mean"):
        task.require("prediction - mean(prediction where site == 'mill') >= 0")
    with pytest.raises(DataError, match="selects no rows of the data"):
        task.require("prediction >= 0 where site == 'nowhere'").solve(client=client)
    with pytest.raises(ParameterError, match="cannot apply rules row by row"):
        from learnopt.solve.routes import sharded
        sharded.Runner(task.require("prediction >= 0 where site == 'mill'"),
                       cluster=ClusterSettings(client=client, method="gram"))
    with pytest.raises(DataError, match=r"unknown name 'sight' \(nearest known: site\)\. Coefficients: f0"):
        task.require("mean(prediction where sight == 'mill') <= 1")
    with pytest.raises(DataError, match="takes one row-wise expression"):
        task.require("mean(f0) <= 1")
    with pytest.raises(DataError, match="selects no rows of the data"):
        task.require("mean(prediction where site == 'nowhere') <= 1")


# ---- smooth losses: newton with row sums

def test_spector_logistic_matches_stata(client, tmp_path):
    # Stata 11 values in statsmodels' discrete-model test results (REFERENCES.md)
    sm = pytest.importorskip("statsmodels.api")
    data = sm.datasets.spector.load_pandas().data
    pattern = write_parts(data, tmp_path, 4)
    task = lo.classification(pattern, target="GRADE", loss="logistic", positive=1.0)
    fit = task.solve(client=client, tol=1e-11, gap_tol=1e-11)   # a flat optimum needs a tight gap
    assert fit.status == "optimal" and fit.extras["method"] == "newton"
    expected = {"GPA": 2.82611297201, "TUCE": 0.0951576702557, "PSI": 2.37868772835}
    for name, value in expected.items():
        assert fit.coef[name] == pytest.approx(value, rel=1e-6)
    assert fit.intercept == pytest.approx(-13.0213483201, rel=1e-6)
    res = sm.Logit(data["GRADE"], sm.add_constant(data[["GPA", "TUCE", "PSI"]])).fit(disp=0)
    assert fit.objective == pytest.approx(-res.llf / len(data), rel=1e-9)


def test_logistic_with_penalty_and_rule_equals_in_memory(client, tmp_path):
    frame = make_classes()
    pattern = write_parts(frame, tmp_path, 4)
    build = lambda d: (lo.classification(d, target="label", loss="logistic")  # noqa: E731
                       .penalize(lo.penalty.l1(0.01)).require("f0 >= 0.8", "site.mill <= 0"))
    fit = build(pattern).solve(client=client)
    ref = build(frame).solve()
    assert fit.status == ref.status == "optimal"
    assert rel(fit.objective, ref.objective) <= 1e-8           # issue target: same optimum to 1e-8
    np.testing.assert_allclose(fit.theta, ref.theta, atol=1e-5)
    assert fit.task.dataset.labels == ref.task.dataset.labels == ("late", "on time")


# ---- everything else: consensus ADMM

def test_hinge_by_admm_equals_in_memory(client, tmp_path):
    frame = make_classes()
    pattern = write_parts(frame, tmp_path, 4)
    build = lambda d: (lo.classification(d, target="label", loss="hinge")  # noqa: E731
                       .penalize(lo.penalty.l2(0.01)).require("f0 >= 0.6"))
    fit = build(pattern).solve(client=client, gap_tol=1e-6)
    ref = build(frame).solve()
    assert fit.status == "optimal" and fit.extras["method"] == "admm"
    assert fit.rel_gap <= 1e-6
    assert ref.objective - 1e-9 <= fit.objective <= ref.objective + 1e-6 * max(1, ref.objective)
    np.testing.assert_allclose(fit.theta, ref.theta, atol=1e-2)
    assert fit.violation <= 1e-9
    assert fit.extras["rounds"] >= 2 and fit.extras["passes"] > fit.extras["rounds"]


def test_admm_on_a_smooth_loss_reaches_the_newton_answer(client, tmp_path):
    from learnopt.solve.routes import sharded
    from learnopt.solve.loop import solve_task
    frame = make_classes(1200)
    pattern = write_parts(frame, tmp_path, 3)
    task = lo.classification(pattern, target="label", loss="logistic").penalize(lo.penalty.l2(0.05))
    runner = sharded.Runner(task, cluster=ClusterSettings(client=client, progress=False, method="admm"))
    fit = solve_task(task, Settings(gap_tol=1e-6), runner=runner)
    ref = lo.classification(frame, target="label", loss="logistic").penalize(lo.penalty.l2(0.05)).solve()
    assert fit.status == "optimal" and fit.extras["method"] == "admm"
    assert rel(fit.objective, ref.objective) <= 1e-6


def test_a_worker_killed_mid_fit_does_not_lose_the_fit(client, tmp_path):
    frame = make_classes(2400)
    pattern = write_parts(frame, tmp_path, 4)
    task = lo.classification(pattern, target="label", loss="hinge").penalize(lo.penalty.l2(0.01))
    result = {}

    def fit_in_background():
        result["fit"] = task.solve(client=client, gap_tol=1e-6)

    worker = threading.Thread(target=fit_in_background)
    worker.start()
    deadline = time.time() + 60
    victim = None
    while time.time() < deadline and worker.is_alive():
        busy = [addr for addr, tasks in client.processing().items() if tasks]
        if busy and client.who_has():
            victim = busy[0]
            time.sleep(1.0)                          # let a few rounds run first
            try:                                     # the nanny starts a new worker process
                client.run(os._exit, 1, workers=[victim])
            except (OSError, distributed.comm.CommClosedError):
                pass                                 # the worker died before it could answer
            break
        time.sleep(0.05)
    worker.join(timeout=300)
    assert victim is not None, "the fit ended before a worker could be stopped"
    fit = result["fit"]
    ref = lo.classification(frame, target="label", loss="hinge").penalize(lo.penalty.l2(0.01)).solve()
    assert fit.status == "optimal"
    assert rel(fit.objective, ref.objective) <= 1e-6


# ---- bad input: a LearnoptError naming the problem, nothing computed wrongly

def test_bad_sharded_input_gets_clear_errors(client, tmp_path):
    frame = make_classes(300)
    pattern = write_parts(frame, tmp_path, 3)
    with pytest.raises(DataError, match="No files match"):
        lo.regression(str(tmp_path / "nothing-*.parquet"), target="f0")
    with pytest.raises(DataError, match="'lable'.*nearest known: label"):
        lo.classification(pattern, target="lable")
    with pytest.raises(DataError, match="must be numeric for regression"):
        lo.regression(pattern, target="label")
    task = lo.classification(pattern, target="label")
    assert task.require("prediction >= 0 where site == 'mill'").row_rules    # applied in the partitions
    with pytest.raises(ParameterError, match="needs the data in memory"):
        task.path()
    with pytest.raises(ParameterError, match="needs the data in memory"):
        task.problem()
    recipe = tmp_path / "shards.toml"
    recipe.write_text(f'title = "shards"\n[data]\npath = "{pattern}"\n[task]\nkind = "classification"\n'
                      f'target = "label"\n[task.loss]\nname = "logistic"\n')
    assert load_recipe(recipe).sharded
    recipe.write_text(recipe.read_text() + '[do]\nholdout = { fraction = 0.2 }\n')
    from learnopt.interface.jobs import run
    from learnopt.interface.recipes import read_recipe
    with pytest.raises(DataError, match="random held-out split of sharded data is not available"):
        run(read_recipe(recipe))
    small_task = lo.regression(pd.DataFrame({"a": [1.0, 2.0, 4.0], "b": [1.0, 3.0, 2.0]}), target="b")
    with pytest.raises(ParameterError, match="client= is for sharded data"):
        small_task.solve(client=client)
    small = small_task.solve()
    with pytest.raises(DataError, match="reads the target from its column"):
        small.evaluate(pattern, target=[1.0, 2.0])
    with pytest.raises(ParameterError, match="only the sharded route"):
        task.solve(route="direct", client=client)
    assert task.check().convex


def test_held_out_evaluation_on_shards_equals_in_memory(client, tmp_path):
    # the same metrics from row sums merged across partitions (reference: evaluate on the frame)
    frame = make_classes(900)
    frame["y"] = 3.0 + 2.0 * frame["f0"] + np.random.default_rng(8).normal(size=len(frame))
    reg = lo.regression(frame.drop(columns="label").iloc[:600], target="y").solve()
    held = frame.drop(columns="label").iloc[600:]
    sharded = reg.evaluate(dd.from_pandas(held, npartitions=3))
    pd.testing.assert_series_equal(sharded.metrics, reg.evaluate(held).metrics, rtol=1e-12)
    cls = lo.classification(frame.drop(columns="y").iloc[:600], target="label", loss="hinge").solve()
    pattern = write_parts(frame.drop(columns="y").iloc[600:], tmp_path, 3)
    got, want = cls.evaluate(pattern), cls.evaluate(frame.drop(columns="y").iloc[600:])
    pd.testing.assert_series_equal(got.metrics, want.metrics, rtol=1e-12)
    pd.testing.assert_frame_equal(got.confusion, want.confusion)


def test_bad_values_in_one_file_name_the_partition(client, tmp_path):
    frame = make_classes(300)
    frame["y"] = frame["f0"] + 1.0
    frame.loc[250, "f2"] = np.nan
    pattern = write_parts(frame.drop(columns="label"), tmp_path, 3)
    with pytest.raises(DataError, match=r"Partition 2 of the data: Column 'f2' has 1 missing"):
        lo.regression(pattern, target="y").solve(client=client)
    three = make_classes(300)
    three.loc[10, "label"] = "cancelled"
    with pytest.raises(DataError, match="3 label"):
        lo.classification(dd.from_pandas(three, npartitions=2), target="label")


def test_sharded_fit_saves_and_loads(client, tmp_path):
    frame = make_classes(600)
    pattern = write_parts(frame, tmp_path, 2)
    fit = lo.classification(pattern, target="label", loss="logistic").solve(client=client)
    fit.save(tmp_path / "model.json")
    back = lo.load_fit(tmp_path / "model.json")
    pd.testing.assert_series_equal(back.predict(frame), fit.predict(frame), check_exact=True)
    assert back.route == "sharded"
    # predictions on sharded data are lazy dask Series, computed partition by partition
    lazy = fit.predict(pattern)
    assert type(lazy).__module__.startswith("dask")
    pd.testing.assert_series_equal(lazy.compute(scheduler="sync").reset_index(drop=True),
                                   fit.predict(frame).reset_index(drop=True), check_dtype=False)
    probs = back.probability(dd.from_pandas(frame, npartitions=3)).compute(scheduler="sync")
    np.testing.assert_allclose(probs.to_numpy(), fit.probability(frame).to_numpy(), rtol=1e-12)


# ---- constrained centres: assignment and per-centre sums by passes

def test_iris_centres_on_shards_reach_the_published_optimum(client, tmp_path):
    # R kmeans on iris, k = 3: best within-cluster sum of squares 78.85144 (REFERENCES.md)
    from sklearn.datasets import load_iris
    iris = load_iris(as_frame=True).frame.drop(columns="target")
    pattern = write_parts(iris, tmp_path, 3)
    fit = lo.centres(pattern, k=3).solve(restarts=5, seed=0, client=client)
    assert fit.objective == pytest.approx(78.85144, abs=5e-5)
    assert sorted(fit.loads["points"].tolist()) == [38, 50, 62]
    ref = lo.centres(iris, k=3).solve(restarts=5, seed=0)
    order = lambda c: c.sort_values(list(c.columns)).to_numpy()  # noqa: E731 - centre numbers may differ
    np.testing.assert_allclose(order(fit.centres), order(ref.centres), atol=1e-9)
    labels = fit.labels.compute(scheduler="sync")
    assert len(labels) == 150 and set(labels) == {1, 2, 3}
    assert np.array_equal(labels.to_numpy(), fit.assign(iris))


def test_constrained_centres_on_shards_match_the_in_memory_fit(client, tmp_path):
    # invented demo points (Lanternfield bike stops); reference: the in-memory fit of the same task
    from learnopt.interface.demo import make_bike_stops
    data = make_bike_stops()
    pattern = write_parts(data, tmp_path, 4)
    where = ["east_km", "north_km"]
    district = lo.rule.polygon([(0, 0), (7, 0), (7.5, 4), (6, 7), (0, 6.5)], features=where)
    river = lo.rule.segment((0.0, 3.0), (7.2, 3.0), features=where)
    build = lambda d: (lo.centres(d, k=4, weights="refills", features=where, fixed=[(0.5, 0.5)])  # noqa: E731
                       .require(district).require(river, centre=2))
    fit = build(pattern).solve(restarts=10, seed=0, client=client)
    ref = build(data).solve(restarts=10, seed=0)
    assert fit.violation <= 1e-8
    assert fit.objective == pytest.approx(ref.objective, rel=1e-9)
    np.testing.assert_allclose(fit.centres.loc[1].to_numpy(), [0.5, 0.5])
    assert abs(fit.centres.loc[2, "north_km"] - 3.0) <= 1e-8          # on the riverside road
    assert fit.loads["weight"].sum() == pytest.approx(data["refills"].sum(), rel=1e-12)


def test_the_cluster_is_found_by_address_or_as_dask_s_current_client(client, tmp_path):
    from learnopt.scale import cluster as shards
    frame = make_classes(400).drop(columns="label")
    frame["y"] = 2.0 * frame["f0"] + 1.0
    pattern = write_parts(frame, tmp_path, 2)
    with client.as_current():
        assert shards.connect(None) is client
    fit = lo.regression(pattern, target="y").solve(client=client.scheduler.address)
    assert fit.status == "optimal" and fit.coef["f0"] == pytest.approx(2.0, abs=1e-9)
    shards.close_local()                     # closes learnopt's own connection, not the cluster
    assert client.status == "running"
    with pytest.raises(ParameterError, match=r"solve\(client=42\): client has to be a distributed.Client, a scheduler address \(text\) or None"):
        shards.connect(42)


def test_a_recipe_with_a_file_pattern_runs_on_the_cluster(client, tmp_path):
    # the bundled demo recipe (invented delivery data) with its data split into 3 CSV files: a
    # rule on means and coefficient rules (its rule row by row is left out here: ADMM needs a
    # few hundred rounds, tested above without a recipe); reference: the in-memory run
    import json
    from click.testing import CliRunner
    from learnopt.interface.cli import main
    from learnopt.interface.demo import demo_recipe, make_data
    (tmp_path / "data").mkdir()
    write_parts(make_data(), tmp_path / "data", 3, kind="csv")
    make_data().to_csv(tmp_path / "data" / "whole.csv.gz", index=False)
    text = (demo_recipe().replace('path = "data/deliveries.csv"', 'path = "data/part*.csv"')
            .replace('    "prediction >= service_floor where segment == \'retail\'",\n', "")
            .replace("holdout = { fraction = 0.2, seed = 7 }", "")
            .replace("[solve]\ntol = 1e-9", f'[solve]\ntol = 1e-9\ncluster = "{client.scheduler.address}"')
            .replace('report = "out/deliveries-report.html"',
                     'report = "out/deliveries-report.html"\npredictions = "out/predictions.csv"'))
    (tmp_path / "shards.toml").write_text(text)
    (tmp_path / "whole.toml").write_text(text.replace('path = "data/part*.csv"', 'path = "data/whole.csv.gz"'))
    out = CliRunner().invoke(main, ["run", str(tmp_path / "shards.toml"), "--json"])
    assert out.exit_code == 0, out.output
    sharded_fit = json.loads(out.output)["fit"]["evidence"]
    whole = json.loads(CliRunner().invoke(main, ["run", str(tmp_path / "whole.toml"), "--json"]).output)
    assert sharded_fit["status"] == whole["fit"]["evidence"]["status"] == "optimal"
    assert sharded_fit["route"] == "sharded" and whole["fit"]["evidence"]["route"] == "newton"
    assert rel(sharded_fit["objective"], whole["fit"]["evidence"]["objective"]) <= 1e-8
    predictions = pd.read_csv(tmp_path / "out" / "predictions.csv")
    assert len(predictions) == len(make_data()) and predictions["row"].is_monotonic_increasing
    report = (tmp_path / "out" / "deliveries-report.html").read_text()
    assert "<img" in report and "Training residuals" in report


# ----------------------------------------------------------------------------- log-link losses

def test_poisson_and_gamma_on_partitions_equal_the_in_memory_fits(client, tmp_path):
    # the sharded newton method binds each partition's targets into the loss; the in-memory newton
    # route is the reference (itself checked against statsmodels in test_glm_losses.py)
    rng = np.random.default_rng(21)
    n = 3000
    X = rng.normal(size=(n, 3))
    mu = np.exp(X @ [0.3, -0.2, 0.1] + 0.4)
    frame = pd.DataFrame(X, columns=["a", "b", "c"]).assign(count=rng.poisson(mu).astype(float),
                                                              amount=rng.gamma(2.0, mu / 2.0))
    pattern = write_parts(frame, tmp_path, 3)
    for target, loss in (("count", lo.loss.poisson()), ("amount", lo.loss.gamma())):
        other = "amount" if target == "count" else "count"
        sharded = lo.regression(pattern, target, loss, features=["a", "b", "c"]).require("a <= 0.25").solve(
            client=client)
        memory = lo.regression(frame.drop(columns=other), target, loss).require("a <= 0.25").solve()
        assert sharded.status == memory.status == "optimal", sharded.message
        assert sharded.extras["method"] == "newton"
        np.testing.assert_allclose(sharded.theta, memory.theta, rtol=1e-6, atol=1e-8)
        assert rel(sharded.objective, memory.objective) < 1e-9


def test_sharded_log_link_refusals(client, tmp_path):
    frame = pd.DataFrame({"a": np.arange(40.0), "count": np.r_[np.ones(38), -1.0, 2.0], "t": np.ones(40)})
    pattern = write_parts(frame, tmp_path, 2)
    with pytest.raises(DataError, match=r"'count' has 1 value.*at least 0"):
        lo.regression(pattern, "count", "poisson", features=["a"]).solve(client=client)
    with pytest.raises(ParameterError, match="exposure='t'.*not available for sharded data"):
        lo.regression(pattern, "count", "poisson", exposure="t")
