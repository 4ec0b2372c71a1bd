"""The [uncertainty] section of a recipe: refits and prediction intervals from the command line,
in the JSON output, the uncertainty file and the report."""
import json
import shutil
from pathlib import Path

import pytest

from learnopt.core.errors import LearnoptError
from learnopt.interface.jobs import run
from learnopt.interface.recipes import read_recipe

RECIPES = Path(__file__).resolve().parent.parent / "recipes"


def _recipe(tmp_path, section: str, holdout: str = "holdout = { fraction = 0.3, seed = 7 }",
            outputs: str = 'uncertainty = "out/u.json"\nreport = "out/r.html"') -> Path:
    shutil.copytree(RECIPES / "data", tmp_path / "data")
    src = (RECIPES / "deliveries.toml").read_text()
    src = src.replace("holdout = { fraction = 0.2, seed = 7 }", holdout)
    head, _ = src.split("[outputs]")
    path = tmp_path / "r.toml"
    path.write_text(head + section + "\n[outputs]\n" + outputs + "\n")
    return path


def test_refits_and_intervals_reach_every_output(tmp_path):
    path = _recipe(tmp_path, "[uncertainty]\nrefits = 30\nseed = 2\nintervals = true\nlevel = 0.8\n")
    job = run(read_recipe(path))
    assert job.bootstrap.n == 30 and job.bootstrap.certified == 30
    # the held-out rows are split in two seeded halves: calibration and check
    held = job.held_out
    assert job.intervals.calibration_rows == len(held) // 2
    assert job.coverage["rows"] == len(held) - len(held) // 2
    saved = json.loads((tmp_path / "out" / "u.json").read_text())
    assert saved["run"] == job.run_id
    assert saved["refits"]["certified"] == 30 and saved["refits"]["level"] == 0.8
    assert set(saved["refits"]["intervals"]) == set(job.task.coefficient_names)
    assert saved["prediction_intervals"]["coverage_on_other_held_out_rows"]["rows"] == job.coverage["rows"]
    page = (tmp_path / "out" / "r.html").read_text()
    assert "How sure: refits on resampled rows" in page and "How sure: prediction intervals" in page
    assert "No p-values" in page


@pytest.mark.parametrize("section, holdout, outputs, words", [
    ("[uncertainty]\nintervals = true\n", "", 'report = "out/r.html"', "uncertainty.intervals"),
    ("[uncertainty]\ndraw_groups = \"region\"\n", "holdout = { fraction = 0.3, seed = 7 }", 'report = "out/r.html"',
     "uncertainty.draw_groups"),
    ("", "holdout = { fraction = 0.3, seed = 7 }", 'uncertainty = "out/u.json"', "outputs.uncertainty"),
    ("[uncertainty]\nrefits = -1\n", "holdout = { fraction = 0.3, seed = 7 }", 'report = "out/r.html"',
     "uncertainty.refits"),
])
def test_recipe_mistakes_are_named(tmp_path, section, holdout, outputs, words):
    path = _recipe(tmp_path, section, holdout=holdout, outputs=outputs)
    with pytest.raises(LearnoptError) as err:
        read_recipe(path)
    assert words in str(err.value) + " ".join(getattr(err.value, "problems", []) or [])


def test_a_mistyped_group_column_names_the_recipe_key(tmp_path):
    path = _recipe(tmp_path, "[uncertainty]\nrefits = 5\ndraw_groups = \"regoin\"\n")
    with pytest.raises(LearnoptError) as err:
        run(read_recipe(path))
    assert str(err.value).startswith("uncertainty.draw_groups:") and "nearest known: region" in str(err.value)
