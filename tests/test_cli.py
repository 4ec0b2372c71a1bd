"""Recipes and the command line: same task as the Python API, clear errors, reports."""
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import learnopt as lo

click = pytest.importorskip("click")
pytest.importorskip("pydantic")
from click.testing import CliRunner  # noqa: E402

from learnopt.interface.cli import main  # noqa: E402
from learnopt.interface.recipes import load_recipe, read_recipe  # noqa: E402
from learnopt.interface import jobs  # noqa: E402

RECIPES = Path(__file__).resolve().parents[1] / "recipes"


def _python_deliveries():
    df = pd.read_csv(RECIPES / "data" / "deliveries.csv")
    return (lo.regression(df, target="minutes", loss=lo.loss.huber(4.0),
                          features=["distance_km", "stops", "size", "region"])
            .penalize(lo.penalty.l1(0.01))
            .require("distance_km >= 0", "0 <= stops <= 3",
                     "increasing(size.small, size.medium, size.large)",
                     "prediction >= service_floor where segment == 'retail'",
                     "mean(prediction where region == 'south') - mean(prediction where region == 'north') <= 1"))


def _python_blend():
    df = pd.read_csv(RECIPES / "data" / "blend.csv")
    return lo.regression(df, "panel", features=["ochre", "umber", "sienna", "slate"], intercept=False).require(
        "ochre >= 0", "umber >= 0", "sienna >= 0", "slate >= 0", "ochre + umber + sienna + slate == 1")


def _python_quality():
    df = pd.read_csv(RECIPES / "data" / "quality.csv")
    return (lo.classification(df, "result", loss="hinge", positive="pass",
                              features=["line", "kiln_temp_c", "moisture_pct", "glaze_mm"])
            .penalize(lo.penalty.l2(0.001))
            .require("mean(prediction where line == 'A') - mean(prediction where line == 'B') <= 0.5"))


def _python_services():
    df = pd.read_csv(RECIPES / "data" / "services.csv")
    return (lo.classification(df, "service", loss="logistic", features=["weight_kg", "distance_km", "sender"],
                              reference="standard")
            .penalize(lo.penalty.l2(0.001))
            .require("sender.household == 0 for class 'freight'"))


def _python_energy():
    df = pd.read_csv(RECIPES / "data" / "energy.csv")
    return (lo.regression(df, "kwh", loss=lo.loss.quantile(0.9), features=["band", "occupancy", "weekday"])
            .penalize(lo.penalty.l1(0.01))
            .require("increasing(band.b1_cold, band.b2_mild, band.b3_warm, band.b4_hot)", "occupancy >= 0"))


def _python_depots():
    df = pd.read_csv(RECIPES / "data" / "bike_stops.csv")
    where = ("east_km", "north_km")
    return (lo.centres(df, k=4, weights="refills", features=list(where), fixed=[(0.5, 0.5)])
            .require(lo.rule.polygon([(0, 0), (7, 0), (7.5, 4), (6, 7), (0, 6.5)], features=where))
            .require(lo.rule.segment((0.0, 3.0), (7.2, 3.0), features=where), centre=2))


PYTHON_TWINS = {"deliveries.toml": _python_deliveries, "blend.toml": _python_blend,
                "quality.toml": _python_quality, "energy.toml": _python_energy, "depots.toml": _python_depots,
                "services.toml": _python_services}


def test_demo_data_files_are_what_the_seeded_script_writes():
    import importlib.util
    spec = importlib.util.spec_from_file_location("make_demo_data", RECIPES / "data" / "make_demo_data.py")
    gen = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(gen)
    for frame, name in ((gen.blend(), "blend.csv"), (gen.quality(), "quality.csv"), (gen.energy(), "energy.csv"),
                        (gen.make_bike_stops(), "bike_stops.csv"), (gen.services(), "services.csv")):
        pd.testing.assert_frame_equal(pd.read_csv(RECIPES / "data" / name),
                                      pd.read_csv(__import__("io").StringIO(frame.to_csv(index=False))))


def test_blend_recipe_recovers_a_blend():
    fit = load_recipe(RECIPES / "blend.toml").solve()
    assert fit.status == "optimal"
    assert fit.coef.sum() == pytest.approx(1.0, abs=1e-8) and (fit.coef >= -1e-9).all()
    np.testing.assert_allclose(fit.coef[["ochre", "umber", "sienna"]], [0.45, 0.30, 0.25], atol=0.02)


@pytest.mark.parametrize("name", sorted(p.name for p in RECIPES.glob("*.toml")))
def test_every_recipe_builds_the_same_task_as_the_python_api(name):
    assert name in PYTHON_TWINS, f"add the Python twin of recipes/{name} to PYTHON_TWINS"
    ours, twin = load_recipe(RECIPES / name), PYTHON_TWINS[name]()
    if isinstance(twin, lo.CentresTask):
        assert (ours.names, ours.k, ours.fixed) == (twin.names, twin.k, twin.fixed)
        assert ours.rules == twin.rules
        np.testing.assert_array_equal(ours.X, twin.X)
        np.testing.assert_array_equal(ours.weights, twin.weights)
        assert ours.solve(restarts=3).objective == pytest.approx(twin.solve(restarts=3).objective, rel=1e-12)
        return
    assert ours.loss == twin.loss and ours.penalties == twin.penalties and ours.intercept == twin.intercept
    assert [r.text for r in ours.rules] == [r.text for r in twin.rules]
    assert ours.features == twin.features
    np.testing.assert_array_equal(ours.dataset.X, twin.dataset.X)
    np.testing.assert_array_equal(ours.dataset.y, twin.dataset.y)
    assert ours.solve().objective == pytest.approx(twin.solve().objective, rel=1e-12)


def test_bundled_demo_recipe_is_the_one_in_recipes():
    from learnopt.interface.demo import demo_recipe
    assert demo_recipe() == (RECIPES / "deliveries.toml").read_text(encoding="utf-8")


@pytest.fixture
def copied(tmp_path):
    """The recipes folder copied, so runs write their outputs under tmp_path, not the repo."""
    import shutil
    target = tmp_path / "recipes"
    shutil.copytree(RECIPES, target, ignore=shutil.ignore_patterns("out"))
    return target


def test_a_recipe_with_several_classes_runs_and_reports(tmp_path, copied):
    """Three classes from a recipe: the fit, the held-out rows, the outputs and the report; what a
    task with several classes does not take yet is refused before anything is solved."""
    runner = CliRunner()
    recipe = str(copied / "services.toml")
    data = json.loads(runner.invoke(main, ["run", recipe, "--json"]).output)
    assert data["fit"]["evidence"]["status"] == "optimal"
    assert data["fit"]["evidence"]["identification"] == "reference class 'standard'"
    assert data["fit"]["rules"]["sender.household == 0 for class 'freight'"]["binds"]
    assert 0.5 < data["evaluation"]["accuracy"] <= 1.0
    pred = pd.read_csv(copied / "out" / "services-predictions.csv")
    assert set(pred["prediction"]) <= {"standard", "express", "freight"}
    np.testing.assert_allclose(pred.filter(like="probability").sum(axis=1), 1.0, atol=1e-12)
    assert lo.load_fit(copied / "out" / "services-fit.json").status == "optimal"
    coef = pd.read_csv(copied / "out" / "services-coefficients.csv", index_col="name")
    assert list(coef.columns) == ["express", "freight", "standard"] and (coef["standard"] == 0).all()
    report = (copied / "out" / "services-report.html").read_text()
    assert "Coefficients by class" in report and "<img" in report and "statistical estimate" in report
    assert runner.invoke(main, ["check", recipe]).exit_code == 0
    text = (copied / "services.toml").read_text() + '\n[uncertainty]\nrefits = 20\n'
    (copied / "services-refits.toml").write_text(text)
    out = runner.invoke(main, ["run", str(copied / "services-refits.toml")])
    assert out.exit_code == 2 and "uncertainty.refits" in out.output and "several" in out.output


def test_run_check_compare_path_in_process(tmp_path, copied):
    runner = CliRunner()
    recipe = str(copied / "deliveries.toml")
    out = runner.invoke(main, ["run", recipe, "--report", str(tmp_path / "r.html")])
    assert out.exit_code == 0, out.output
    assert "optimal" in out.output and "statistical estimate" in out.output
    report = (tmp_path / "r.html").read_text()
    assert "<img" in report and "Held-out evaluation" in report and "statistical estimate" in report
    data = json.loads(runner.invoke(main, ["run", recipe, "--json"]).output)
    assert data["fit"]["evidence"]["status"] == "optimal" and "evaluation" in data
    assert (copied / "out" / "deliveries-fit.json").exists() and not (RECIPES / "out").exists()
    assert runner.invoke(main, ["check", recipe]).exit_code == 0
    cmp_ = runner.invoke(main, ["compare", recipe, "--solvers", "clarabel,scs", "--json"])
    assert set(json.loads(cmp_.output)["compare"]) == {"clarabel", "scs"}
    walk = runner.invoke(main, ["path", recipe, "--n", "4", "--json"])
    assert len(json.loads(walk.output)["path"]) == 4 and "decade" in json.loads(walk.output)["path_end"]


def test_demo_command_writes_data_recipe_and_report(tmp_path):
    out = CliRunner().invoke(main, ["demo", "--folder", str(tmp_path / "demo")])
    assert out.exit_code == 0, out.output
    assert (tmp_path / "demo" / "out" / "deliveries-report.html").exists()   # where its recipe says
    assert (tmp_path / "demo" / "out" / "deliveries-fit.json").exists()
    back = lo.load_fit(tmp_path / "demo" / "out" / "deliveries-fit.json")
    assert back.status == "optimal"


def test_demo_as_a_subprocess(tmp_path):
    proc = subprocess.run([sys.executable, "-m", "learnopt.interface.cli", "demo", "--folder", str(tmp_path / "d"), "--json"],
                          capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    assert json.loads(proc.stdout)["fit"]["evidence"]["status"] == "optimal"


BAD = [
    ("[data]\npath='x.csv'\ncolour='red'\n[task]\nkind='regression'\ntarget='y'\n[task.loss]\nname='squared'\n",
     ["data.colour: unknown key; remove it or fix its spelling"]),
    ("[data]\npath='x.csv'\n[task]\nkind='ranking'\ntarget='y'\n[task.loss]\nname='squared'\n",
     ['task.kind: found the text "ranking"; it has to be one of "regression", "classification", "centres"']),
    ("[data]\npath='x.csv'\n[task]\nkind='regression'\ntarget='y'\n[task.loss]\nname='huber'\ndelta=-1\n"
     "[solve]\ntol=5\n", ["task.loss.delta: found -1; it has to be above 0 (huber loss)",
                         "solve.tol: found 5; it has to be a number between 0 and 1"]),
    ("[data]\npath='x.csv'\n[task]\nkind='regression'\ntarget='y'\n[task.loss]\nname='squared'\ntau=0.5\n",
     ["the squared loss takes no parameters; remove tau"]),
    ("[data]\npath='x.csv'\n[task]\nkind='regression'\ntarget='y'\n[task.loss]\nname='squared'\n"
     "[[task.penalties]]\nname='group'\nstrength=1\n", ["task.penalties[0]: the group penalty needs 'groups'"]),
    ("[data\npath='x.csv'", ["is not valid TOML"]),
    ("", ["data: missing; add a [data] section with at least path",
          "task: missing; add a [task] section with at least kind"]),
]


@pytest.mark.parametrize("text,fragments", BAD, ids=[f"bad{k}" for k in range(len(BAD))])
def test_bad_recipes_list_every_problem_with_its_place(tmp_path, text, fragments, reliability):
    path = tmp_path / "bad.toml"
    path.write_text(text)
    with pytest.raises(lo.DataError) as info:
        read_recipe(path)
    for fragment in fragments:
        assert fragment in str(info.value)
    out = CliRunner().invoke(main, ["run", str(path)])
    assert out.exit_code == 2 and "Traceback" not in out.output
    reliability.record("hostile recipe", "validation error")


def test_recipe_names_and_keys_come_from_the_registries(tmp_path):
    # every fittable loss (with its own parameters) and every penalty is a recipe block; the
    # block's own check gives the range error, placed at the recipe key
    from learnopt.interface.recipes import LossPart, PenaltyPart
    for kind in ("regression", "classification"):
        for name in lo.loss.for_kind(kind):
            example = lo.loss.LOSSES[name].examples[-1]
            keys = {k: getattr(example, k) for k in lo.loss.LOSSES[name].parameters}
            assert LossPart(name=name, **keys).build() == example
    assert set(PenaltyPart.model_fields) == {"name", "strength", "factors", "mix", "groups", "order", "features"}
    assert PenaltyPart(name="shared", strength=0.5, features=["a", "b"]).build() == lo.penalty.shared(0.5, ["a", "b"])
    assert PenaltyPart(name="total_variation", strength=0.5, order=["a", "b", "c"], factors=[1, 0]).build() \
        == lo.penalty.total_variation(0.5, ["a", "b", "c"], factors=[1.0, 0.0])
    path = tmp_path / "bad.toml"
    path.write_text("[data]\npath='x.csv'\n[task]\nkind='regression'\ntarget='y'\n[task.loss]\nname='squared'\n"
                    "[[task.penalties]]\nname='elastic_net'\nstrength=-1\nmix=2\n"
                    "[[task.penalties]]\nname='total_variation'\nstrength=1\norder='ab'\n")
    with pytest.raises(lo.DataError) as info:
        read_recipe(path)
    assert info.value.problems == [
        "task.penalties[0].strength: found -1; it has to be at least 0 (elastic_net penalty)",
        "task.penalties[0].mix: found 2; it has to be between 0 and 1, both included (elastic_net penalty)",
        'task.penalties[1].order: found the text "ab"; it has to be a list of at least two coefficient names, '
        "in order (total_variation penalty)"]


def test_old_penalty_key_weights_still_works_with_a_note(tmp_path, copied):
    recipe = copied / "deliveries.toml"
    text = recipe.read_text()
    assert 'name = "l1"\nstrength = 0.01\n' in text
    recipe.write_text(text.replace('name = "l1"\nstrength = 0.01\n',
                                   'name = "l1"\nstrength = 0.01\nweights = { distance_km = 0.0 }\n'))
    with pytest.warns(DeprecationWarning, match="'weights' is now called 'factors'"):
        task = load_recipe(recipe)
    assert task.penalties == (lo.penalty.l1(0.01, factors={"distance_km": 0.0}),)
    out = CliRunner().invoke(main, ["check", str(recipe)])
    assert out.exit_code == 0 and "note: The penalty key 'weights' is now called 'factors'" in out.output
    both = text.replace('strength = 0.01\n', 'strength = 0.01\nweights = { stops = 1.0 }\nfactors = { stops = 1.0 }\n')
    recipe.write_text(both)
    with pytest.raises(lo.DataError, match="give 'factors' only"):
        read_recipe(recipe)


def test_rules_in_the_replaced_forms_still_run_with_a_note(copied):
    recipe = copied / "deliveries.toml"
    text = recipe.read_text()
    new = '"increasing(size.small, size.medium, size.large)"'
    assert new in text
    recipe.write_text(text.replace(new, '"increasing(`size=small`, {size=medium}, size.large)"'))
    out = CliRunner().invoke(main, ["check", str(recipe)])
    assert out.exit_code == 0, out.output
    assert "note: Rule 'increasing(`size=small`, {size=medium}, size.large)': names are now quoted in braces" in out.output
    assert "write size.small for {size=small}" in out.output and "write size.medium for {size=medium}" in out.output
    assert out.output.count("write size.medium") == 1                      # each note once


def test_compare_refuses_unknown_solver_names_with_the_known_ones(copied):
    out = CliRunner().invoke(main, ["compare", str(copied / "deliveries.toml"), "--solvers", "clarabel,osqpp"])
    assert out.exit_code == 2 and "(nearest known: osqp)" in out.output and "clarabel, osqp, scs" in out.output


def test_missing_data_and_non_convex_rule_exit_codes(tmp_path):
    recipe = (RECIPES / "deliveries.toml").read_text().replace('path = "data/deliveries.csv"',
                                                               f'path = "{RECIPES / "data" / "deliveries.csv"}"')
    (tmp_path / "nc.toml").write_text(recipe.replace('"distance_km >= 0",', '"distance_km * stops <= 3",'))
    out = CliRunner().invoke(main, ["check", str(tmp_path / "nc.toml")])
    assert out.exit_code == 3 and "not convex" in out.output.lower()
    (tmp_path / "nodata.toml").write_text(recipe.replace(str(RECIPES / "data" / "deliveries.csv"), "nope.csv"))
    out = CliRunner().invoke(main, ["run", str(tmp_path / "nodata.toml"), "--json"])
    assert out.exit_code == 2 and json.loads(out.output)["error"] == "DataError"


def test_hostile_recipe_values_never_crash(tmp_path, reliability):
    # fuzzing (common practice): random junk in every slot ends in exit code 2 with a message
    rng = np.random.default_rng(0)
    junk = ["1e400", "-1", "'\\u00e9\\u00e8'", "[1, [2]]", "{a = 1}", "true", "'__import__(\"os\")'", "''"]
    keys = ["data.path", "task.kind", "task.target", "task.loss.name", "task.loss.delta", "solve.tol",
            "do.action", "do.n", "task.rules"]
    for _ in range(25):
        key, value = keys[rng.integers(len(keys))], junk[rng.integers(len(junk))]
        section, leaf = key.rsplit(".", 1)
        text = ("[data]\npath='d.csv'\n[task]\nkind='regression'\ntarget='y'\n[task.loss]\nname='huber'\n"
                "[solve]\n[do]\n").replace(f"[{section}]\n", f"[{section}]\n{leaf} = {value}\n", 1)
        path = tmp_path / "h.toml"
        path.write_text(text)
        out = CliRunner().invoke(main, ["run", str(path)])
        assert out.exit_code == 2, (key, value, out.output)
        assert "Traceback" not in out.output
        reliability.record("hostile recipe", "validation error")


def test_report_renders_in_a_headless_browser(tmp_path, copied):
    # a real browser (Debian's chromium, no network, no GPU): the page loads with no console
    # errors and the inlined histogram is drawn (its bar colour #44aa77 appears on screen)
    import shutil
    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    if browser is None:
        pytest.skip("chromium is not installed (apt-get install chromium) - the browser check needs it")
    report = tmp_path / "report.html"
    out = CliRunner().invoke(main, ["run", str(copied / "deliveries.toml"), "--report", str(report)])
    assert out.exit_code == 0
    shot = tmp_path / "shot.png"
    proc = subprocess.run([browser, "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
                           "--disable-extensions", "--proxy-server=127.0.0.1:9", "--enable-logging=stderr",
                           "--v=0", "--window-size=1000,3000", f"--screenshot={shot}", report.as_uri()],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr[-2000:]
    console = [line for line in proc.stderr.splitlines() if "CONSOLE" in line or "Uncaught" in line]
    assert not console, console
    import matplotlib.image as mpimg
    pixels = (mpimg.imread(shot)[..., :3] * 255).round().astype(int)
    bar = np.all(np.abs(pixels - np.array([0x44, 0xAA, 0x77])) <= 3, axis=-1)
    assert bar.sum() > 2000


def test_an_infeasible_recipe_shows_its_conflicts_everywhere(tmp_path, copied):
    # item: the conflicting rules and how far each must move, in the terminal, JSON and report
    text = (copied / "deliveries.toml").read_text()
    rules_at = text.index("rules = [")
    text = text[:rules_at] + 'rules = ["distance_km >= 1", "distance_km <= 0", ' + text[rules_at + len("rules = ["):]
    (copied / "conflict.toml").write_text(text)
    runner = CliRunner()
    out = runner.invoke(main, ["run", str(copied / "conflict.toml"), "--report", str(tmp_path / "r.html")])
    assert "infeasible" in out.output and "conflicting rules" in out.output
    assert "distance_km >= 1" in out.output and "distance_km <= 0" in out.output
    data = json.loads(runner.invoke(main, ["run", str(copied / "conflict.toml"), "--json"]).output)
    assert data["fit"]["evidence"]["conflicts"] == pytest.approx({"distance_km >= 1": 1.0, "distance_km <= 0": 1.0})
    assert data["fit"]["evidence"]["attempts"][0]["outcome"].startswith("infeasible")
    report = (tmp_path / "r.html").read_text()
    assert "Conflicting rules" in report and "Solver attempts" in report


def test_version_and_plain_numbers_in_messages():
    runner = CliRunner()
    out = runner.invoke(main, ["--version"])
    assert out.exit_code == 0 and out.output.strip() == f"learnopt {lo.__version__}"
    with pytest.raises(lo.ParameterError) as err:
        lo.loss.huber(np.float64(-2.0))
    assert "np.float64" not in str(err.value) and "-2.0" in str(err.value)


def test_a_recipe_without_a_loss_takes_the_python_default(copied):
    # recipes and Python agree: no [task.loss] means squared for regression, as lo.regression does
    text = (copied / "blend.toml").read_text()
    start = text.index("[task.loss]")
    end = text.index("\n[", start + 1)
    (copied / "noloss.toml").write_text(text[:start] + text[end + 1:])
    task = lo.load_recipe(copied / "noloss.toml")
    assert task.loss.name == "squared"


@pytest.mark.parametrize("old,new,expect", [
    ('strength = 0.01', 'strenght = 0.01', "(nearest known: strength)"),
    ('target = "minutes"', 'targt = "minutes"', "(nearest known: target)"),
    ('name = "huber"', 'name = "zero_one"', "convex surrogate"),
])
def test_recipe_mistakes_get_the_same_help_as_python(copied, old, new, expect):
    text = (copied / "deliveries.toml").read_text()
    assert old in text
    (copied / "bad.toml").write_text(text.replace(old, new, 1))
    out = CliRunner().invoke(main, ["check", str(copied / "bad.toml")])
    assert out.exit_code == 2 and expect in out.output, out.output


def test_without_the_cli_extra_the_command_says_how_to_install_it():
    # a base install has no click / rich / pydantic: no traceback, a message and exit code 6
    code = (
        "import sys\n"
        "class Hide:\n"
        "    def find_spec(self, name, path=None, target=None):\n"
        "        if name.split('.')[0] in ('click', 'rich', 'pydantic'):\n"
        "            raise ImportError(name)\n"
        "sys.meta_path.insert(0, Hide())\n"
        "import importlib.util\n"
        "importlib.util.find_spec = lambda name, *a: None if name in ('click', 'rich', 'pydantic') else 1\n"
        "from learnopt.interface.cli import main\n"
        "main()\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert out.returncode == 6 and "pip install 'learnopt[cli]'" in out.stderr
    assert "Traceback" not in out.stderr


def test_check_counts_the_rows_run_fits_and_names_the_recipe_folder(copied, tmp_path, monkeypatch):
    # the demo recipe holds out 20% of its rows: check must describe the rules on the rows run fits
    out = CliRunner().invoke(main, ["check", str(copied / "deliveries.toml"), "--json"])
    data = json.loads(out.output)
    floor = [fact for piece, fact in data["pieces"] if "service_floor" in piece][0]
    job = jobs.run(read_recipe(copied / "deliveries.toml"))
    rows = sum(r.rows for r in job.task.requirements if "service_floor" in r.text)
    assert f"({rows} rows)" in floor and rows < 223            # 223: the retail rows before the holdout
    assert any("held out" in d and "480 training rows" in d for d in data["data"])
    # a missing data file: the key, the path, and that a relative path is read from the recipe's folder
    monkeypatch.chdir(tmp_path)
    text = (copied / "blend.toml").read_text().replace('path = "data/blend.csv"', 'path = "data/nope.csv"')
    (copied / "nope.toml").write_text(text)
    out = CliRunner().invoke(main, ["run", str(copied / "nope.toml")])
    assert out.exit_code == 2
    assert "data.path = 'data/nope.csv'" in out.output and "recipe's folder" in out.output
    assert "working" not in out.output


@pytest.mark.parametrize("args,fragment", [
    (["runn"], "no command 'runn' (nearest known: run)"),
    (["run", "x.toml", "--jsn"], "no option --jsn (nearest known: --json)"),
    (["path", "x.toml", "--n", "abc"], "--n has to be a whole number from 2 to 500"),
    (["run"], "learnopt run needs a recipe file"),
])
def test_command_line_mistakes_are_told_in_our_words(args, fragment):
    # our own wording, exit 2 (invalid input); the framework's stock usage block never shows
    out = subprocess.run([sys.executable, "-m", "learnopt.interface.cli", *args], capture_output=True, text=True)
    assert out.returncode == 2 and fragment in out.stderr
    assert "Usage:" not in out.stderr and "Error:" not in out.stderr and "Traceback" not in out.stderr


def test_a_learnopt_error_says_what_stopped_it(tmp_path):
    out = CliRunner().invoke(main, ["run", str(tmp_path / "missing.toml")])
    assert out.exit_code == 2 and out.output.startswith("learnopt stopped (invalid input, exit 2): ")
