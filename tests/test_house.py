"""The house's contracts that users and routes rely on: the public face, the status words, the
frozen fit, the route registry, and a convexity check that never builds the n-row problem.
Common practice (no outside source): these are properties of learnopt's own design."""
from __future__ import annotations

import dataclasses
import json

import numpy as np
import pytest

import learnopt as lo
from learnopt.interface import task as task_module
from learnopt.problem import formulate
from learnopt.problem.problem import Problem
from learnopt.solve.routes import REGISTRY, ROUTES, lookup
from learnopt.solve.routes.base import RouteSpec, RunnerBase

# every name the face exported before the package was layered
FACE = ["regression", "classification", "centres", "CentresTask", "CentresFit", "fusion", "FusionTask",
        "FusionFit", "estimator", "load_fit", "loss", "penalty", "rule", "Task", "Fit", "Attempt", "Timings",
        "Verdict", "Evaluation", "LearnoptError", "DataError", "ParameterError", "NotConvexError", "SolverError",
        "TooLargeError", "MissingDependencyError", "AccuracyWarning", "installed_solvers"]


@pytest.fixture(scope="module")
def task():
    rng = np.random.default_rng(7)
    X = rng.normal(size=(60, 3))
    y = X @ [1.0, -0.5, 0.25] + 0.3 + 0.1 * rng.normal(size=60)
    return lo.regression(X, y).penalize(lo.penalty.l1(0.01)).require("x0 <= 0.9")


def test_every_public_name_is_still_on_the_face():
    missing = [name for name in FACE if not hasattr(lo, name)]
    assert not missing
    assert lo.rule.polygon and lo.rule.bounds and lo.loss.huber and lo.penalty.l1


def test_status_is_a_word_that_compares_prints_and_serialises_as_before(task):
    fit = task.solve()
    assert fit.status == "optimal" and fit.status is lo.Status.OPTIMAL
    assert f"{fit.status}" == "optimal" and str(fit.status) == "optimal"
    assert json.loads(json.dumps({"s": fit.status})) == {"s": "optimal"}
    assert "status='optimal'" in repr(fit)


def test_fit_is_frozen_and_built_by_keyword_only(task):
    fit = task.solve()
    with pytest.raises(dataclasses.FrozenInstanceError):
        fit.status = "failed"
    with pytest.raises(dataclasses.FrozenInstanceError):
        fit.timings.total = 0.0
    values = [getattr(fit, f.name) for f in dataclasses.fields(fit)]
    with pytest.raises(TypeError):
        lo.Fit(*values)
    assert lo.Fit(**{f.name: getattr(fit, f.name) for f in dataclasses.fields(fit)}).objective == fit.objective


def test_a_task_prints_as_a_summary_not_its_arrays(task):
    text = repr(task)
    assert text.startswith("Task(regression, loss=squared") and "array(" not in text and len(text) < 300


def test_routes_see_the_plain_problem_and_the_fit_keeps_the_users_task(task):
    fit = task.solve()
    assert fit.task is task and isinstance(task, Problem)
    assert type(task.as_problem()) is Problem and task.as_problem().requirements == task.requirements


def test_every_route_is_a_registry_row_with_the_protocol():
    assert ROUTES == tuple(REGISTRY) and "direct" in ROUTES and "sharded" in ROUTES
    for name, spec in REGISTRY.items():
        assert isinstance(spec, RouteSpec) and spec.name == name and spec.summary
        assert callable(spec.eligible) and callable(spec.runner)
    with pytest.raises(lo.ParameterError, match=r"solve\(route='sideways'\): route has to be one of 'direct', "):
        lookup("sideways")
    # the protocol's defaults: no preference, no end facts
    assert RunnerBase.prefer == () and RunnerBase().finish(None) is None


def test_check_looks_at_one_row_only(task, monkeypatch):
    def refuse(*args, **kwargs):
        raise AssertionError("check() must not build the whole problem")
    monkeypatch.setattr(formulate, "build", refuse)
    monkeypatch.setattr(task_module, "build", refuse)          # where Task.problem() finds it
    verdict = task.check()
    assert verdict.convex


def test_a_model_file_with_an_unknown_status_is_refused(task, tmp_path):
    path = tmp_path / "fit.json"
    task.solve().save(path)
    saved = json.loads(path.read_text())
    saved["evidence"]["status"] = "splendid"
    path.write_text(json.dumps(saved))
    with pytest.raises(lo.DataError, match="evidence.status is 'splendid'"):
        lo.load_fit(path)


def test_a_loaded_fit_describes_its_task_and_predicts_the_same(task, tmp_path):
    fit = task.solve()
    fit.save(tmp_path / "fit.json")
    back = lo.load_fit(tmp_path / "fit.json")
    assert isinstance(back.task, lo.Task) and back.status == "optimal"
    X = np.random.default_rng(1).normal(size=(5, 3))
    np.testing.assert_array_equal(back.predict(X), fit.predict(X))


def test_outputs_get_the_users_default_permissions(task, tmp_path):
    # common practice: a new file is 0666 less the umask; atomic writing must not narrow it
    import os
    old = os.umask(0o022)
    try:
        task.solve().save(tmp_path / "fit.json")
        assert (os.stat(tmp_path / "fit.json").st_mode & 0o777) == 0o644
        os.chmod(tmp_path / "fit.json", 0o664)               # a rewrite keeps what the file had
        task.solve().save(tmp_path / "fit.json")
        assert (os.stat(tmp_path / "fit.json").st_mode & 0o777) == 0o664
    finally:
        os.umask(old)


def test_load_recipe_is_on_the_face():
    from pathlib import Path
    recipe = Path(__file__).resolve().parents[1] / "recipes" / "deliveries.toml"
    assert isinstance(lo.load_recipe(recipe), lo.Task)


def test_a_core_install_imports_and_solves_without_the_extras():
    # the extras (recipes, command line, scale-out, plots, estimator) stay optional: with their
    # packages hidden, learnopt imports and solves (common practice for optional dependencies)
    import subprocess
    import sys
    code = (
        "import sys\n"
        "class Hide:\n"
        "    def find_spec(self, name, path=None, target=None):\n"
        "        if name.split('.')[0] in ('pydantic', 'click', 'rich', 'sklearn', 'dask', 'distributed', "
        "'matplotlib'):\n"
        "            raise ImportError(name)\n"
        "sys.meta_path.insert(0, Hide())\n"
        "import numpy as np, learnopt as lo\n"
        "print(lo.regression(np.eye(5), np.arange(5.0)).solve().status)\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr[-2000:]
    assert out.stdout.strip() == "optimal"
