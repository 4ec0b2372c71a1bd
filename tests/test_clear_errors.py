"""Bad input ends in a LearnoptError that names the user's object, never a raw exception; on the
command line it exits with its code (2 for bad input, 5 for out of memory), never 1 and never
with a traceback. Cases are common practice for input checking (overflowing literals, mixed
types, damaged files, deep nesting, unreachable addresses); property tests draw the values.
"""
import gzip
import json
import socket

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import learnopt as lo
from learnopt.core.errors import DataError, LearnoptError, ParameterError
from learnopt.data.table import read_table

click = pytest.importorskip("click")
pytest.importorskip("pydantic")
from click.testing import CliRunner  # noqa: E402

from learnopt.interface import jobs  # noqa: E402
from learnopt.interface.cli import main  # noqa: E402

RNG = np.random.default_rng(19)
FRAME = pd.DataFrame({"a": RNG.normal(size=30), "b": RNG.normal(size=30),
                      "region": RNG.choice(["north", "south", "west"], 30)})
FRAME["y"] = 2 * FRAME.a + RNG.normal(size=30)
QUICK = settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])


def _refused(reliability, kind, fn, error=LearnoptError, *fragments):
    with pytest.raises(error) as info:
        fn()
    for f in fragments:
        assert f in str(info.value), str(info.value)
    reliability.record(kind, type(info.value).__name__)
    return info.value


# ---------------------------------------------------------------- rules
@QUICK
@given(st.integers(min_value=400, max_value=1200), st.sampled_from(
    ["{n} * a <= 1", "a <= {n}", "prediction >= 0 where a > {n}"]))
def test_numbers_too_long_for_floating_point_name_the_rule(reliability, digits, form):
    rule = form.format(n="1" + "0" * digits)
    err = _refused(reliability, "hostile rule", lambda: lo.regression(FRAME, "y").require(rule), DataError)
    assert f"Rule {rule!r}" in str(err) and "too large" in str(err)


@QUICK
@given(st.floats(min_value=1e-300, max_value=1e-16))
def test_a_coefficient_floating_point_cannot_honour_is_refused_not_infeasible(reliability, tiny):
    rule = f"{tiny!r} * a >= 1"
    err = _refused(reliability, "hostile rule", lambda: lo.regression(FRAME, "y").require(rule), DataError)
    assert "below what floating point can honour" in str(err) and "on a" in str(err)


def test_a_coefficient_lost_beside_another_is_refused(reliability):
    _refused(reliability, "hostile rule", lambda: lo.regression(FRAME, "y").require("a + 1e-300 * b >= 1"),
             DataError, "on b")


def test_the_reference_level_may_be_named_and_counts_as_zero(reliability):
    # README: the reference level of an encoded column may be named (its coefficient is 0)
    fit = lo.regression(FRAME, "y").require("region.north >= 0", "region.south - region.north >= 0").solve()
    assert fit.status == "optimal" and fit.coefficients().loc["region.south"].iloc[0] >= -1e-6
    _refused(reliability, "hostile rule", lambda: lo.regression(FRAME, "y").require("region.north <= -1"),
             DataError, "region.north", "reference level", "never hold")


# ---------------------------------------------------------------- data in memory
def test_predicting_on_a_duplicated_column_or_a_text_matrix_is_refused(reliability):
    fit = lo.regression(FRAME, "y").solve()
    _refused(reliability, "bad input", lambda: fit.predict(pd.concat([FRAME, FRAME[["a"]]], axis=1)),
             DataError, "duplicate column names ['a']")
    arr = lo.regression(FRAME[["a", "b"]].to_numpy(), FRAME.y.to_numpy()).solve()
    for text in (np.array([["1", "2"]]), np.array([["x", "2"]])):
        _refused(reliability, "bad input", lambda: arr.predict(text), DataError, "must hold numbers")


def test_an_integer_column_name_as_target_says_to_name_columns_with_text(reliability):
    _refused(reliability, "bad input", lambda: lo.regression(FRAME.rename(columns={"y": 0}), 0), DataError,
             "target=0", "target='0'")


@QUICK
@given(st.lists(st.floats(-1e6, 1e6, allow_nan=False) | st.integers(-1000, 1000), min_size=30, max_size=30))
def test_numbers_stored_as_objects_are_refused_naming_the_column(reliability, values):
    frame = FRAME.copy()
    frame["a"] = pd.Series(values, dtype=object)
    _refused(reliability, "bad input", lambda: lo.regression(frame, "y"), DataError, "Column 'a'", "astype(float)")


@QUICK
@given(st.integers(-10**6, 10**6))
def test_labels_that_print_alike_are_not_two_classes(reliability, label):
    frame = FRAME[["a", "b"]].copy()
    frame["label"] = pd.Series([label if i % 2 else str(label) for i in range(30)], dtype=object)
    _refused(reliability, "bad input", lambda: lo.classification(frame, "label"), DataError, "print alike")


# ---------------------------------------------------------------- files
def test_damaged_or_misplaced_data_files_are_named(tmp_path, reliability):
    (tmp_path / "dup.csv").write_text("a,a,y\n1,2,3\n4,5,6\n")
    good = gzip.compress(b"a,y\n1,2\n3,4\n5,6\n" * 50)
    (tmp_path / "cut.csv.gz").write_bytes(good[: len(good) // 2])
    (tmp_path / "bytes.csv").write_bytes(b"a,y\n1,\xff\xfe\n")
    (tmp_path / "folder.csv").mkdir()
    for name, fragment in (("dup.csv", "'a' more than once"), ("cut.csv.gz", "damaged or cut-short"),
                           ("bytes.csv", "not UTF-8"), ("folder.csv", "is a folder")):
        _refused(reliability, "bad file", lambda: read_table(tmp_path / name), DataError, name, fragment)


def test_a_deeply_nested_model_file_is_refused(tmp_path, reliability):
    path = tmp_path / "deep.json"
    path.write_text("[" * 100000 + "]" * 100000)
    _refused(reliability, "bad file", lambda: lo.load_fit(path), DataError, "nested too deeply")


# ---------------------------------------------------------------- solve options
@QUICK
@given(st.sampled_from(["tol", "gap_tol", "feas_tol"]), st.floats(min_value=1.0, max_value=1e6))
def test_tolerances_lie_between_zero_and_one(reliability, name, value):
    task = lo.regression(FRAME, "y")
    _refused(reliability, "bad input", lambda: task.solve(**{name: value}), ParameterError,
             f"{name} has to be between 0 and 1")


@pytest.mark.parametrize("solver, options", [("clarabel", {"max_iter": "many"}), ("ecos", {"max_iters": "x"}),
                                             ("scs", {"max_iters": [1]})])
def test_solver_options_of_the_wrong_type_name_the_option(reliability, solver, options):
    pytest.importorskip(solver)
    task = lo.regression(FRAME, "y").penalize(lo.penalty.l1(0.1))     # solved by the solver itself
    _refused(reliability, "bad input", lambda: task.solve(solver, solver_options=options, fallback=False),
             ParameterError, f"solver_options={options!r}", solver)


@QUICK
@given(st.one_of(st.integers(31, 10**6), st.floats(2.01, 29.99).filter(lambda f: f != int(f))))
def test_folds_must_be_whole_and_no_more_than_rows(reliability, folds):
    task = lo.regression(FRAME, "y").penalize(lo.penalty.l1(0.1))
    _refused(reliability, "bad input", lambda: task.cross_validate(folds=folds), ParameterError, "folds has to be")


# ---------------------------------------------------------------- command line
def _recipe(tmp_path, extra="", rules="[]"):
    FRAME.to_csv(tmp_path / "data.csv", index=False)
    path = tmp_path / "r.toml"
    path.write_text(f'[data]\npath = "data.csv"\n[task]\nkind = "regression"\ntarget = "y"\nrules = {rules}\n{extra}')
    return str(path)


def _exit(args, code, *fragments):
    out = CliRunner().invoke(main, args)
    assert out.exit_code == code, out.output
    assert "Traceback" not in out.output
    for f in fragments:
        assert f in out.output, out.output
    return out


def test_text_in_square_brackets_is_printed_literally(tmp_path, reliability):
    recipe = _recipe(tmp_path, rules='["[a] >= 0"]')
    _exit(["run", recipe], 2, "Rule '[a] >= 0'", "'[a]' is not part")
    reliability.record("command line", "exit 2")
    tricky = _recipe(tmp_path, extra='[outputs]\ncoefficients = "out/[bold]c.csv"\n').replace("r.toml", "r.toml")
    _exit(["run", tricky], 0, "[bold]c.csv")


def test_deeply_nested_recipe_and_recipe_folders_exit_2(tmp_path, reliability):
    deep = tmp_path / "deep.toml"
    deep.write_text("a = " + "[" * 5000 + "]" * 5000 + "\n")
    _exit(["run", str(deep)], 2, "nests tables or lists too deeply")
    (tmp_path / "latin.toml").write_bytes(b'title = "\xff"\n')
    _exit(["check", str(tmp_path / "latin.toml")], 2, "not UTF-8")
    reliability.record("command line", "exit 2")
    reliability.record("command line", "exit 2")


@pytest.mark.parametrize("fraction, fragment", [(0.0001, "no rows to hold out"), (0.9999, "no rows to train on")])
def test_a_holdout_that_leaves_no_rows_exits_2(tmp_path, reliability, fraction, fragment):
    recipe = _recipe(tmp_path, extra=f"[do.holdout]\nfraction = {fraction}\n")
    _exit(["run", recipe], 2, "do.holdout.fraction", fragment)
    reliability.record("command line", "exit 2")


def test_an_output_where_a_folder_or_file_stands_exits_2(tmp_path, reliability):
    (tmp_path / "afile").write_text("x")
    (tmp_path / "adir").mkdir()
    for target, fragment in (("afile/c.csv", "which is not a folder"), ("adir", "is a folder")):
        recipe = _recipe(tmp_path, extra=f'[outputs]\ncoefficients = "{target}"\n')
        _exit(["run", recipe], 2, "outputs.coefficients", fragment)      # refused before solving
        reliability.record("command line", "exit 2")


def test_out_of_memory_says_what_to_do_and_exits_5(tmp_path, monkeypatch, reliability):
    def huge(*args, **kwargs):
        raise MemoryError()
    monkeypatch.setattr(jobs, "run", huge)
    _exit(["run", _recipe(tmp_path)], 5, "learnopt stopped (too large, exit 5)", "out of memory", "file pattern")
    reliability.record("command line", "exit 5")


def test_an_unreachable_cluster_fails_fast(monkeypatch, reliability):
    pytest.importorskip("distributed")
    from learnopt.scale import cluster
    with socket.socket() as s:          # a port nothing listens on: bound, then released
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    monkeypatch.setattr(cluster, "CONNECT_SECONDS", 0.5)
    import time
    start = time.perf_counter()
    err = _refused(reliability, "bad input", lambda: cluster.connect(f"tcp://127.0.0.1:{port}"), ParameterError,
                   f"127.0.0.1:{port}", "check the address")
    assert time.perf_counter() - start < 5, err
    assert json.dumps(str(err))


def test_a_target_with_several_labels_names_them_and_the_way_forward():
    """Several classes are fitted with the logistic and hinge losses; another loss is refused with
    the target's labels and a one-against-the-rest column, and following that advice fits
    (checked against scikit-learn's LogisticRegression on its bundled iris data, l2 with
    C = 1/(2 n lam))."""
    from sklearn.datasets import load_iris
    from sklearn.linear_model import LogisticRegression

    iris = load_iris(as_frame=True)
    data = iris.frame.drop(columns="target").rename(columns=lambda c: c.replace(" (cm)", "").replace(" ", "_"))
    data["species"] = iris.target_names[iris.target]
    with pytest.raises(lo.ParameterError) as err:
        lo.classification(data, target="species", loss="squared_hinge")
    said = str(err.value)
    assert "'species' of 3 labels ['setosa', 'versicolor', 'virginica']" in said
    assert "loss='logistic'" in said and "loss='hinge'" in said
    assert "data.assign(is_setosa=data['species'] == 'setosa')" in said and "target='is_setosa'" in said
    with pytest.raises(lo.DataError, match="has 1 label"):
        lo.classification(data[data.species == "setosa"], target="species")
    # the advice, followed (versicolor against the rest is not separable, so the l2 fit is unique)
    binary = data.assign(is_versicolor=data["species"] == "versicolor").drop(columns="species")
    lam = 0.01
    fit = lo.classification(binary, target="is_versicolor", loss="logistic").penalize(lo.penalty.l2(lam)).solve()
    assert fit.status == "optimal"
    X = binary.drop(columns="is_versicolor").to_numpy()
    ref = LogisticRegression(C=1 / (2 * len(X) * lam), tol=1e-12, max_iter=10_000).fit(X, binary["is_versicolor"])
    np.testing.assert_allclose(fit.coef.to_numpy(), ref.coef_.ravel(), atol=1e-5)
    np.testing.assert_allclose(fit.intercept, ref.intercept_[0], atol=1e-5)
