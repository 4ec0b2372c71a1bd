"""Where a recipe run may write, and its outputs as one set (learnopt/interface/output_set.py,
core/files.py write_atomic). The checks are common practice: paths compared after following
links (os.path.realpath), hashes compared with hashlib, file kinds read with os.lstat."""
import hashlib
import json
import os
import socket
import stat
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

import learnopt as lo

click = pytest.importorskip("click")
pytest.importorskip("pydantic")
from click.testing import CliRunner  # noqa: E402

from learnopt.core.errors import OutputError  # noqa: E402
from learnopt.core.files import write_atomic  # noqa: E402
from learnopt.interface import jobs  # noqa: E402
from learnopt.interface.cli import main  # noqa: E402
from learnopt.interface.output_set import OUTPUT_KEYS, entry, examine, plan  # noqa: E402
from learnopt.interface.recipes import read_recipe, recipe_from  # noqa: E402

RECIPE = """title = "small invented fit"
[data]
path = "data/points.csv"
[task]
kind = "regression"
target = "y"
rules = ["a >= 0"]
{extra}
[outputs]
{outputs}
"""
OUTPUTS = ('fit = "out/fit.json"\ncoefficients = "out/coefficients.csv"\npredictions = "out/predictions.csv"\n'
           'report = "out/report.html"')


def _data(folder: Path) -> None:
    rng = np.random.default_rng(3)                       # invented numbers, seeded
    a, b = rng.normal(size=40), rng.normal(size=40)
    (folder / "data").mkdir(parents=True, exist_ok=True)
    pd.DataFrame({"a": a.round(3), "b": b.round(3), "y": (1.5 * a - b + rng.normal(scale=0.1, size=40)).round(3)}
                 ).to_csv(folder / "data" / "points.csv", index=False)


@pytest.fixture
def home(tmp_path):
    """A recipe folder with invented data, beside a folder 'elsewhere' outside it."""
    folder = tmp_path / "work"
    _data(folder)
    (tmp_path / "elsewhere").mkdir()
    return folder


def _recipe(folder: Path, outputs: str = OUTPUTS, extra: str = "", name: str = "small.toml") -> Path:
    path = folder / name
    path.write_text(RECIPE.format(outputs=outputs, extra=extra))
    return path


def _cli(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


def _refused(out, *fragments):
    assert out.exit_code == 2, out.output
    assert out.output.startswith("learnopt stopped (invalid input, exit 2)") and "Traceback" not in out.output
    for f in fragments:
        assert f in out.output, (f, out.output)


# ---------------------------------------------------------------- outputs stay in the recipe's folder
@pytest.mark.parametrize("where", ["../elsewhere/fit.json", "ABSOLUTE", "../../fit.json"])
def test_an_output_outside_the_recipe_folder_is_refused_before_solving(home, where):
    where = str(home.parent / "elsewhere" / "fit.json") if where == "ABSOLUTE" else where
    recipe = _recipe(home, f'fit = "{where}"')
    out = _cli("run", recipe)
    _refused(out, "outputs.fit", where, "outside the recipe's folder", "--write-anywhere")
    assert not (home.parent / "elsewhere" / "fit.json").exists() and not (home / "small.run.json").exists()


def test_a_symlinked_folder_leading_out_is_refused(home):
    os.symlink(home.parent / "elsewhere", home / "out")
    out = _cli("run", _recipe(home, 'fit = "out/fit.json"'))
    _refused(out, "outputs.fit", "a link on the way leads out", "--write-anywhere")
    assert os.listdir(home.parent / "elsewhere") == []


def test_write_anywhere_lets_the_recipe_write_outside(home):
    recipe = _recipe(home, 'fit = "../elsewhere/fit.json"')
    out = _cli("run", recipe, "--write-anywhere")
    assert out.exit_code == 0, out.output
    assert lo.load_fit(home.parent / "elsewhere" / "fit.json").status == "optimal"
    assert examine(read_recipe(recipe)).whole      # the record sits next to the fit file


def test_report_option_may_point_anywhere(home):
    target = home.parent / "elsewhere" / "r.html"
    out = _cli("run", _recipe(home, 'coefficients = "out/c.csv"'), "--report", target)
    assert out.exit_code == 0, out.output
    assert target.exists()


def test_every_command_that_writes_takes_the_option():
    for name in ("run", "compare", "path", "demo"):
        assert "--write-anywhere" in _cli(name, "--help").output


SEGMENTS = st.lists(st.sampled_from(["..", ".", "a", "b", "out", "link", "fit.json"]), min_size=1, max_size=6)


@pytest.fixture(scope="module")
def tree(tmp_path_factory):
    """root/work (the recipe folder) with a/, b/ and link -> root/outside; root/outside exists."""
    root = tmp_path_factory.mktemp("tree")
    work = root / "work"
    for d in ("a", "b", "a/b"):
        (work / d).mkdir(parents=True, exist_ok=True)
    (root / "outside").mkdir()
    os.symlink(root / "outside", work / "link")
    os.symlink(root / "outside", work / "a" / "link")
    return work


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(parts=SEGMENTS, key=st.sampled_from([k for k in OUTPUT_KEYS]))
def test_property_an_accepted_output_lands_inside_after_links(tree, parts, key):
    # property: plan() accepts a recipe output exactly when the folder it would be written in,
    # links followed, is the recipe's folder or below it (or something else is wrong with it)
    relative = "/".join(parts + ["x.out"])
    raw = {"data": {"path": "d.csv"}, "task": {"kind": "centres" if key in ("centres", "assignments") else
                                               "regression", **({"k": 2} if key in ("centres", "assignments")
                                                               else {"target": "y"})},
           "outputs": {key: relative},
           **({"uncertainty": {"refits": 10}} if key == "uncertainty" else {}),     # something to write there
           **({"do": {"action": "by_group", "by": "g"}} if key == "groups" else {})}
    recipe = recipe_from(raw, folder=str(tree))
    target = os.path.normpath(os.path.join(str(tree), relative))
    real_parent = os.path.realpath(os.path.dirname(target))
    home = os.path.realpath(tree)
    outside = os.path.commonpath([real_parent, home]) != home
    try:
        planned = plan(recipe)
    except OutputError as exc:
        assert outside or "not a folder" in str(exc), str(exc)
        assert f"outputs.{key}" in str(exc)
        if outside:
            assert "--write-anywhere" in str(exc) and relative in str(exc)
    else:
        assert not outside
        assert all(os.path.commonpath([os.path.dirname(entry(p.path)), home]) == home for p in planned)
    try:
        plan(recipe, anywhere=True)                      # allowed elsewhere: only a non-folder on the way fails
    except OutputError as exc:
        assert "outside" not in str(exc)


# ---------------------------------------------------------------- never onto the data, the recipe or each other
@pytest.mark.parametrize("outputs,keys", [
    ('fit = "data/points.csv"', ["outputs.fit", "data.path"]),
    ('coefficients = "./data/../data/points.csv"', ["outputs.coefficients", "data.path"]),
    ('report = "small.toml"', ["outputs.report", "the recipe file"]),
    ('fit = "out/same.csv"\ncoefficients = "out/same.csv"', ["outputs.fit", "outputs.coefficients", "both name"]),
    ('predictions = "out/p.csv"\nreport = "out/./p.csv"', ["outputs.predictions", "outputs.report", "both name"]),
    ('fit = "small.run.json"', ["outputs.fit", "the run record", "both name"]),
])
def test_an_output_onto_data_recipe_or_another_output_is_refused(home, outputs, keys):
    before = (home / "data" / "points.csv").read_bytes()
    recipe = _recipe(home, outputs)
    text = recipe.read_text()
    out = _cli("run", recipe)
    _refused(out, *keys)
    assert (home / "data" / "points.csv").read_bytes() == before and recipe.read_text() == text


def test_a_held_out_file_and_a_data_pattern_are_protected(home):
    (home / "data" / "points.csv").rename(home / "data" / "part-1.csv")
    (home / "data" / "held.csv").write_text((home / "data" / "part-1.csv").read_text())
    recipe = _recipe(home, 'fit = "data/held.csv"\ncoefficients = "data/part-1.csv"\npredictions = "data/part-7.csv"',
                     extra='[do]\nholdout = { path = "data/held.csv" }')
    recipe.write_text(recipe.read_text().replace("data/points.csv", "data/part-*.csv"))
    with pytest.raises(OutputError) as caught:
        plan(read_recipe(recipe))
    found = caught.value.problems
    assert any("outputs.fit" in p and "do.holdout.path" in p for p in found)
    assert any("outputs.coefficients" in p and "data.path" in p for p in found)
    assert any("outputs.predictions" in p and "would read it as data" in p for p in found)   # a future match
    assert len(found) == 3
    elsewhere = _recipe(home, 'predictions = "data/kept/part-8.csv"\nfit = "out/part-2.csv"')
    elsewhere.write_text(elsewhere.read_text().replace("data/points.csv", "data/part-*.csv"))
    assert plan(read_recipe(elsewhere))          # '*' stays within one folder, as the pattern reads files


def test_data_reached_through_a_link_is_protected(home):
    os.symlink(home / "data", home / "alias")
    with pytest.raises(OutputError, match="outputs.fit.*data.path"):
        plan(read_recipe(_recipe(home, 'fit = "alias/points.csv"')))


def test_report_option_onto_an_output_or_the_data_is_refused(home):
    recipe = _recipe(home, 'fit = "out/fit.json"')
    _refused(_cli("run", recipe, "--report", home / "out" / "fit.json"), "--report", "outputs.fit", "both name")
    _refused(_cli("run", recipe, "--report", home / "data" / "points.csv"), "--report", "data.path")
    # --report replaces outputs.report for this run (only one of them is written): the same path is fine
    assert plan(read_recipe(_recipe(home, 'report = "out/r.html"')), report=str(home / "out" / "r.html"))


NAMES = st.sampled_from(["out/a.csv", "out/b.csv", "out/./a.csv", "out/../out/b.csv", "c.csv"])


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(chosen=st.dictionaries(st.sampled_from(["fit", "coefficients", "predictions", "report"]), NAMES, min_size=1))
def test_property_two_outputs_never_share_a_file(tmp_path, chosen):
    # property: plan() refuses exactly when two keys name one file, and names both keys
    recipe = recipe_from({"data": {"path": "d.csv"}, "task": {"kind": "regression", "target": "y"},
                          "outputs": chosen}, folder=str(tmp_path))
    files = {}
    for key, name in chosen.items():
        files.setdefault(os.path.normpath(name), []).append(f"outputs.{key}")
    shared = [keys for keys in files.values() if len(keys) > 1]
    if shared:
        with pytest.raises(OutputError) as caught:
            plan(recipe)
        text = str(caught.value)
        assert all(k in text for keys in shared for k in keys) and "both name" in text
    else:
        assert len({entry(p.path) for p in plan(recipe)}) == len(chosen) + 1    # + the run record


# ---------------------------------------------------------------- only regular files or new paths
def _specials(tmp_path):
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    sock = tmp_path / "sock"
    server = socket.socket(socket.AF_UNIX)
    server.bind(str(sock))
    (tmp_path / "folder").mkdir()
    (tmp_path / "real.txt").write_text("kept")
    os.symlink(tmp_path / "real.txt", tmp_path / "link")
    return server, {"a folder": tmp_path / "folder", "a named pipe": fifo, "a socket": sock,
                    "a device": Path(os.devnull), "a symbolic link": tmp_path / "link"}


def test_write_atomic_refuses_what_is_not_a_regular_file(tmp_path):
    server, specials = _specials(tmp_path)
    try:
        for what, path in specials.items():
            mode = os.lstat(path).st_mode
            with pytest.raises(OutputError) as caught:
                write_atomic(path, "text")
            assert what in str(caught.value) and repr(str(path)) in str(caught.value)
            assert os.lstat(path).st_mode == mode            # left as it was
        assert (tmp_path / "real.txt").read_text() == "kept"
        assert not [n for n in os.listdir(tmp_path) if n.startswith(".learnopt-")]
        (tmp_path / "plain").write_text("old")
        write_atomic(tmp_path / "plain", "new")              # a regular file is still replaced
        assert (tmp_path / "plain").read_text() == "new"
        with pytest.raises(OutputError, match="not a folder"):
            write_atomic(tmp_path / "plain" / "below.txt", "x")
    finally:
        server.close()


def test_a_fit_saved_onto_a_folder_says_so(tmp_path):
    fit = lo.regression(np.eye(3), np.ones(3)).solve()
    with pytest.raises(OutputError, match="is a folder"):
        fit.save(tmp_path)


def test_report_or_outputs_onto_special_files_are_refused_before_solving(home):
    os.mkfifo(home / "pipe.csv")
    (home / "out").mkdir()
    recipe = _recipe(home, 'coefficients = "pipe.csv"\nfit = "out"')
    out = _cli("run", recipe, "--report", os.devnull)
    _refused(out, "outputs.coefficients", "a named pipe", "outputs.fit", "a folder", "--report", "a device")
    assert stat.S_ISFIFO(os.lstat(home / "pipe.csv").st_mode) and os.path.isdir(home / "out")
    assert stat.S_ISCHR(os.stat(os.devnull).st_mode)
    folder = _cli("run", _recipe(home, 'coefficients = "out/c.csv"'), "--report", home / "out")
    assert folder.exit_code == 2 and "--report" in folder.output and "not a folder" in folder.output


# ---------------------------------------------------------------- one run, one set
def _sha(path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def test_a_run_writes_a_record_of_every_file_with_its_run(home):
    recipe = _recipe(home)
    out = _cli("run", recipe, "--json")
    assert out.exit_code == 0, out.output
    shown = json.loads(out.output)
    record = json.loads((home / "out" / "small.run.json").read_text())
    run = record["run"]
    assert shown["run"] == run and shown["record"] == str(home / "out" / "small.run.json") and len(run) == 32
    listed = {f["key"]: f for f in record["files"]}
    assert set(listed) == {"outputs.fit", "outputs.coefficients", "outputs.predictions", "outputs.report"}
    for f in record["files"]:
        path = home / "out" / f["path"]
        assert f["sha256"] == _sha(path) and f["size"] == path.stat().st_size
    assert json.loads((home / "out" / "fit.json").read_text())["run"] == run
    assert f'data-learnopt-run="{run}"' in (home / "out" / "report.html").read_text()
    assert lo.load_fit(home / "out" / "fit.json").status == "optimal"     # the stamp is inside the digest
    assert _cli("verify", recipe).exit_code == 0


def test_verify_names_missing_changed_and_foreign_files(home):
    recipe = _recipe(home)
    assert _cli("run", recipe).exit_code == 0
    first = (home / "out" / "fit.json").read_bytes()
    assert _cli("run", recipe).exit_code == 0
    (home / "out" / "fit.json").write_bytes(first)                       # the fit of the run before
    (home / "out" / "coefficients.csv").write_text("name,coef\n")        # edited by hand
    (home / "out" / "predictions.csv").unlink()
    out = _cli("verify", recipe)
    assert out.exit_code == 1, out.output
    assert "outputs.fit" in out.output and "written by another run" in out.output
    assert "outputs.coefficients" in out.output and "changed since run" in out.output
    assert "outputs.predictions" in out.output and "missing" in out.output
    assert "outputs.report" not in out.output
    state = json.loads(_cli("verify", recipe, "--json").output)
    assert state["whole"] is False and len(state["problems"]) == 3


def test_a_run_killed_between_outputs_leaves_a_set_verify_rejects(home, monkeypatch):
    recipe = _recipe(home)
    assert _cli("run", recipe).exit_code == 0
    real = jobs.write_atomic

    def killed(path, text):                               # the process dies after the model file
        if str(path).endswith("coefficients.csv"):
            raise KeyboardInterrupt
        real(path, text)
    monkeypatch.setattr(jobs, "write_atomic", killed)
    with pytest.raises(KeyboardInterrupt):
        jobs.run(read_recipe(recipe))
    monkeypatch.undo()
    out = _cli("verify", recipe)
    assert out.exit_code == 1 and "outputs.fit" in out.output and "written by another run" in out.output
    again = CliRunner().invoke(main, ["run", str(recipe)])
    assert again.exit_code == 0
    assert "no longer one set" in again.stderr and "outputs.fit" in again.stderr
    assert _cli("verify", recipe).exit_code == 0


def test_two_recipes_sharing_an_output_are_told_apart(home):
    one = _recipe(home, 'coefficients = "out/shared.csv"\nfit = "out/one.json"', name="one.toml")
    two = _recipe(home, 'coefficients = "out/shared.csv"\nfit = "out/two.json"', name="two.toml")
    two.write_text(two.read_text().replace('rules = ["a >= 0"]', 'rules = ["a <= 1"]'))
    assert _cli("run", one).exit_code == 0 and _cli("run", two).exit_code == 0
    out = _cli("verify", one)
    assert out.exit_code == 1 and "outputs.coefficients" in out.output
    assert _cli("verify", two).exit_code == 0


@pytest.mark.parametrize("record,said", [(None, "no run record"), ("{not json", "cannot be read"),
                                         ('{"format": "other"}', "not a learnopt run record")])
def test_verify_without_a_usable_record_is_not_whole(home, record, said):
    recipe = _recipe(home)
    if record is not None:
        (home / "out").mkdir()
        (home / "out" / "small.run.json").write_text(record)
    out = _cli("verify", recipe)
    assert out.exit_code == 1 and said in out.output and "Traceback" not in out.output


def test_centres_runs_are_stamped_too(home):
    rng = np.random.default_rng(5)                        # invented points, seeded
    pd.DataFrame({"x": rng.normal(size=30).round(3), "y": rng.normal(size=30).round(3)}).to_csv(
        home / "data" / "pts.csv", index=False)
    recipe = home / "c.toml"
    recipe.write_text('[data]\npath = "data/pts.csv"\n[task]\nkind = "centres"\nk = 2\n[solve]\nrestarts = 2\n'
                      '[outputs]\nfit = "out/c.json"\ncentres = "out/c.csv"\n')
    assert _cli("run", recipe).exit_code == 0
    run = json.loads((home / "out" / "c.run.json").read_text())["run"]
    assert json.loads((home / "out" / "c.json").read_text())["run"] == run
    assert len(lo.load_fit(home / "out" / "c.json").centres) == 2       # the stamp is inside the digest
    assert _cli("verify", recipe).exit_code == 0


def test_demo_into_a_file_or_over_a_pipe_is_refused(tmp_path):
    (tmp_path / "taken").write_text("mine")
    _refused(_cli("demo", "--folder", tmp_path / "taken" / "sub"), "--folder", "not a folder")
    assert (tmp_path / "taken").read_text() == "mine"
    (tmp_path / "d").mkdir()
    os.mkfifo(tmp_path / "d" / "deliveries.toml")
    _refused(_cli("demo", "--folder", tmp_path / "d"), "a named pipe")
    assert not (tmp_path / "d" / "data").exists()


def test_check_looks_at_the_outputs_too(tmp_path):
    # the same output checks as run, before anything is read or solved
    import shutil
    from pathlib import Path
    recipes = Path(__file__).resolve().parents[1] / "recipes"
    shutil.copytree(recipes, tmp_path / "r", ignore=shutil.ignore_patterns("out"))
    path = tmp_path / "r" / "blend.toml"
    path.write_text(path.read_text().replace('coefficients = "out/blend-weights.csv"', 'coefficients = "../x.csv"'))
    out = CliRunner().invoke(main, ["check", str(path)])
    assert out.exit_code == 2 and "outputs.coefficients" in out.output and "--write-anywhere" in out.output
    assert CliRunner().invoke(main, ["check", str(path), "--write-anywhere"]).exit_code == 0
