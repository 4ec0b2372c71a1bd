"""Centres have the same surfaces as regression: check(), a short repr, model files and
lo.load_fit, recipes (kind = "centres"), learnopt run/check, JSON and the report."""
import json
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

import learnopt as lo
from learnopt.core.files import seal
from learnopt.interface.commands import main
from learnopt.interface.demo import make_bike_stops

RECIPES = Path(__file__).resolve().parents[1] / "recipes"
WHERE = ("east_km", "north_km")
DISTRICT = lo.rule.polygon([(0, 0), (7, 0), (7.5, 4), (6, 7), (0, 6.5)], features=WHERE)


def _depots():
    return (lo.centres(make_bike_stops(), k=4, weights="refills", features=list(WHERE), fixed=[(0.5, 0.5)])
            .require(DISTRICT).require(lo.rule.segment((0.0, 3.0), (7.2, 3.0), features=WHERE), centre=2))


def test_check_is_ready_names_the_steps_and_finds_what_deserves_a_look():
    verdict = _depots().check()
    assert verdict.ready and bool(verdict) and not verdict.convex
    assert "local optimum" in str(verdict) and "projection" in str(verdict)
    # the demo data has one stop whose rounded demand is 0.0 (invented data, seeded)
    assert any("weight 0" in d for d in verdict.data)
    # conflicting rules on one centre: named with the centre and the rules, before any solve
    bad = _depots().require("centre 3: east_km >= 9")
    verdict = bad.check()
    assert not verdict.ready
    assert any(r.startswith("centre 3:") and "east_km >= 9" in r and "inside polygon" in r for r in verdict.reasons)
    with pytest.raises(lo.DataError, match="centre 3.*east_km >= 9"):
        bad.solve(restarts=1)


def test_check_data_findings():
    # common practice: k-means distances are in the units given, so very different spreads,
    # constant coordinates, fewer distinct points than centres and fixed centres that break a
    # rule are worth saying before solving
    pts = pd.DataFrame({"a": [0.0, 1.0, 0.0, 1.0], "b": [0.0, 0.0, 5000.0, 5000.0], "c": [2.0] * 4})
    notes = " | ".join(lo.centres(pts, k=4, fixed=[(9.0, 0.0, 2.0)]).require("a <= 1").check().data)
    assert "'c' is the same for every point" in notes
    assert "'b' spans 5e+03 while 'a' spans 1" in notes
    assert "fixed centre 1 at (9.0, 0.0, 2.0) breaks a <= 1" in notes
    dup = pd.DataFrame({"a": [0.0, 0.0, 1.0], "b": [1.0, 1.0, 1.0]})
    assert any("only 2 distinct" in d for d in lo.centres(dup, k=2).check().data) is False
    assert any("only 2 distinct" in d for d in lo.centres(pd.concat([dup] * 2), k=3).check().data)


def test_reprs_are_short():
    task = _depots()
    fit = task.solve(restarts=2)
    assert repr(task) == "CentresTask(2400 points, coordinates east_km, north_km; k=4, 1 fixed, 2 rules)"
    assert repr(fit).startswith("CentresFit(status='local optimum', objective=") and len(repr(fit)) < 120
    assert "\n" not in repr(fit)


def test_model_file_round_trip_and_load_fit(tmp_path):
    pts = make_bike_stops()
    fit = _depots().solve(restarts=3)
    fit.save(tmp_path / "depots.json")
    back = lo.load_fit(tmp_path / "depots.json")
    assert isinstance(back, lo.CentresFit) and back.status == "local optimum"
    pd.testing.assert_frame_equal(back.centres, fit.centres)             # repr floats: exact round trip
    np.testing.assert_array_equal(back.assign(pts), fit.assign(pts))
    assert back.objective == fit.objective and back.message == fit.message
    assert back.task.rules == fit.task.rules and back.task.fixed == fit.task.fixed
    pd.testing.assert_frame_equal(back.evaluate(pts, pts["refills"]).to_frame(),
                                  fit.evaluate(pts, pts["refills"]).to_frame())
    # the weighted objective on the training points is the fit's objective (definition)
    assert fit.evaluate(pts, pts["refills"])["objective"] == pytest.approx(fit.objective, rel=1e-12)
    # a regression model file still loads through the same function
    reg = lo.regression(pd.DataFrame({"x": [0.0, 1, 2, 3], "y": [1.0, 3, 5, 7]}), "y").solve()
    reg.save(tmp_path / "reg.json")
    assert isinstance(lo.load_fit(tmp_path / "reg.json"), lo.Fit)
    with pytest.raises(lo.DataError, match="'centres' fit.*lo.load_fit"):
        lo.Fit.load(tmp_path / "depots.json")


@pytest.mark.parametrize("edit,match", [
    (lambda d: d["centres"][1].__setitem__(0, "nan"), "finite coordinates"),
    (lambda d: d["centres"].pop(), "must be 4 rows"),
    (lambda d: d["evidence"].__setitem__("status", "optimal"), "evidence.status"),
    (lambda d: d["task"]["rules"][0].__setitem__("rule", "Anything"), "cannot read"),
    (lambda d: d["evidence"].pop("restarts"), "not a complete centres model file"),
    (lambda d: d.__setitem__("schema_version", -3), "positive whole number"),
])
def test_edited_centres_model_files_are_refused(tmp_path, edit, match):
    _depots().solve(restarts=1).save(tmp_path / "c.json")
    saved = json.loads((tmp_path / "c.json").read_text())
    edit(saved)
    (tmp_path / "c.json").write_text(json.dumps(saved))
    with pytest.raises(lo.DataError, match="no longer matches the digest|positive whole number"):
        lo.load_fit(tmp_path / "c.json")                     # edited by hand: refused
    if saved.get("schema_version") == 2:                    # written wrong with a fresh digest: the field is named
        (tmp_path / "c.json").write_text(json.dumps(seal(saved)))
    with pytest.raises(lo.DataError, match=match):
        lo.load_fit(tmp_path / "c.json")


@pytest.fixture
def copied(tmp_path):
    target = tmp_path / "recipes"
    shutil.copytree(RECIPES, target, ignore=shutil.ignore_patterns("out"))
    return target


def test_centres_recipe_runs_checks_and_reports(copied, tmp_path):
    runner = CliRunner()
    recipe = str(copied / "depots.toml")
    out = runner.invoke(main, ["run", recipe])
    assert out.exit_code == 0, out.output
    assert "local optimum" in out.output and "siting decisions" in out.output
    written = {p.name for p in (copied / "out").iterdir()}
    assert written == {"depots-fit.json", "depots-centres.csv", "depots-assignments.csv", "depots-report.html",
                       "depots.run.json"}        # the run record, written last (see output_set)
    table = pd.read_csv(copied / "out" / "depots-centres.csv", index_col="centre")
    assert list(table.columns) == ["east_km", "north_km", "weight", "points"] and table.loc[1, "east_km"] == 0.5
    labels = pd.read_csv(copied / "out" / "depots-assignments.csv", index_col="row")["centre"]
    assert len(labels) == 2400 and set(labels) == {1, 2, 3, 4}
    assert table["points"].sum() == 2400
    report = (copied / "out" / "depots-report.html").read_text()
    assert "<h2>Map</h2>" in report and "<img" in report and "siting decisions" in report
    assert "statistical estimate" not in report                         # worded for placements
    data = json.loads(runner.invoke(main, ["run", recipe, "--json"]).output)
    assert data["fit"]["task"]["kind"] == "centres" and len(data["fit"]["centres"]) == 4
    assert lo.load_fit(copied / "out" / "depots-fit.json").centres.shape == (4, 2)
    check = runner.invoke(main, ["check", recipe, "--json"])
    assert check.exit_code == 0 and json.loads(check.output)["ready"] is True


def test_centres_recipe_holdout_and_conflicts(copied):
    text = (copied / "depots.toml").read_text()
    (copied / "h.toml").write_text(text.replace("[outputs]", "[do.holdout]\nfraction = 0.25\nseed = 3\n\n[outputs]"))
    data = json.loads(CliRunner().invoke(main, ["run", str(copied / "h.toml"), "--json"]).output)
    assert 450 < data["evaluation"]["n"] < 750
    (copied / "c.toml").write_text(text.replace("centre = 2\n", "centre = 2\n\n[[task.areas]]\naround = [9.0, 9.0]\n"
                                                               "radius = 1.0\ncentre = 3\n"))
    out = CliRunner().invoke(main, ["check", str(copied / "c.toml")])
    assert out.exit_code == 1 and "centre 3: its rules leave no allowed place" in out.output
    out = CliRunner().invoke(main, ["run", str(copied / "c.toml"), "--json"])
    assert out.exit_code == 2 and "centre 3" in json.loads(out.output)["message"]


@pytest.mark.parametrize("old,new,fragments", [
    ('k = 4\n', 'k = 4\ntarget = "refills"\n', ["task.target: a centres recipe has no target"]),
    ('k = 4\n', '', ["task.k: a centres recipe needs k"]),
    ('[outputs]\n', '[outputs]\ncoefficients = "x.csv"\n', ["outputs.coefficients: a centres recipe writes centres"]),
    ('[solve]\n', '[do]\naction = "path"\n\n[solve]\n', ["do.action: a centres recipe only solves"]),
    ('polygon = [[0, 0]', 'radius = 2.0\npolygon = [[0, 0]', ["'around' (a disc's middle) and 'radius' go together"]),
    ('segment = [[0.0, 3.0]', 'polygon = [[0, 0], [1, 0], [0, 1]]\nsegment = [[0.0, 3.0]',
     ["give exactly one shape", "polygon, segment"]),
])
def test_centres_recipe_keys_are_checked(copied, old, new, fragments):
    text = (copied / "depots.toml").read_text()
    assert old in text
    (copied / "bad.toml").write_text(text.replace(old, new, 1))
    out = CliRunner().invoke(main, ["check", str(copied / "bad.toml")])
    assert out.exit_code == 2 and "Traceback" not in out.output
    for f in fragments:
        assert f in out.output


def test_regression_recipe_refuses_centres_keys(copied):
    text = (copied / "blend.toml").read_text().replace("intercept = false\n", "intercept = false\nk = 3\n")
    text = text.replace("[outputs]\n", "[solve]\nrestarts = 4\n\n[outputs]\ncentres = \"c.csv\"\n")
    (copied / "bad.toml").write_text(text)
    out = CliRunner().invoke(main, ["check", str(copied / "bad.toml")])
    assert out.exit_code == 2
    for f in ("task.k: only a centres recipe takes k", "outputs.centres: only a centres recipe writes centres",
              "solve.restarts: only a centres recipe takes restarts"):
        assert f in out.output
