"""The HTML report as a page: provenance at the top, each picture only where it applies, and
every bundled recipe's page fitting a 1280 px window in a real browser with every image loaded.
Checks are common practice (hashes compared with hashlib, layout measured in the browser)."""
import hashlib
import html
import json
import re
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import learnopt as lo

pytest.importorskip("click")
pytest.importorskip("pydantic")
from click.testing import CliRunner  # noqa: E402

from learnopt.interface import jobs  # noqa: E402
from learnopt.interface.cli import main  # noqa: E402
from learnopt.interface.provenance import data_files, provenance  # noqa: E402
from learnopt.interface.recipes import read_recipe  # noqa: E402
from learnopt.interface.report import html as report_html  # noqa: E402
from learnopt.interface.report_blocks import fmt, png  # noqa: E402
from learnopt.interface.report_pictures import simple_bounds  # noqa: E402

RECIPES = Path(__file__).resolve().parents[1] / "recipes"
WIDTH = 1280
# runs after the page has loaded and writes what it measured into the page, where --dump-dom sees it
PROBE = """<script>window.addEventListener("load", function () {
  var imgs = Array.prototype.slice.call(document.images);
  var out = {width: document.documentElement.scrollWidth, images: imgs.length,
             loaded: imgs.filter(function (i) { return i.complete && i.naturalWidth > 0; }).length};
  var pre = document.createElement("pre"); pre.id = "page-checks"; pre.textContent = JSON.stringify(out);
  document.body.appendChild(pre);
});</script>"""


@pytest.fixture
def copied(tmp_path):
    """The recipes folder copied, so runs write their outputs under tmp_path, not the repo."""
    target = tmp_path / "recipes"
    shutil.copytree(RECIPES, target, ignore=shutil.ignore_patterns("out"))
    return target


def _browser():
    found = shutil.which("chromium") or shutil.which("chromium-browser")
    if found is None:
        pytest.skip("chromium is not installed (apt-get install chromium) - the page check needs it")
    return found


def _chromium(browser, *args):
    return subprocess.run([browser, "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
                           "--disable-extensions", "--proxy-server=127.0.0.1:9", "--hide-scrollbars",
                           f"--window-size={WIDTH},1600", *args], capture_output=True, text=True, timeout=120)


def _measure(browser, report: Path, tmp_path: Path) -> dict:
    """Screenshot the page at 1280 px, then load a copy with the probe and read its findings."""
    shot = tmp_path / (report.stem + ".png")
    proc = _chromium(browser, f"--screenshot={shot}", report.as_uri())
    assert proc.returncode == 0 and shot.exists(), proc.stderr[-2000:]
    probed = tmp_path / (report.stem + "-probed.html")
    probed.write_text(report.read_text(encoding="utf-8").replace("</body>", PROBE + "</body>"), encoding="utf-8")
    proc = _chromium(browser, "--virtual-time-budget=10000", "--dump-dom", probed.as_uri())
    assert proc.returncode == 0, proc.stderr[-2000:]
    found = re.search(r'<pre id="page-checks">(.*?)</pre>', proc.stdout)
    assert found, proc.stdout[-2000:]
    return json.loads(html.unescape(found.group(1)))


PAGES = [("deliveries", "run", ()), ("blend", "run", ()), ("quality", "run", ()), ("energy", "run", ()),
         ("depots", "run", ()), ("blend", "compare", ("--solvers", "clarabel,osqp,scs"))]


@pytest.mark.parametrize("name,command,extra", PAGES, ids=[f"{n}-{c}" for n, c, _ in PAGES])
def test_each_bundled_recipe_report_fits_the_page(copied, tmp_path, name, command, extra):
    browser = _browser()
    report = tmp_path / f"{name}-{command}.html"
    out = CliRunner().invoke(main, [command, str(copied / f"{name}.toml"), *extra, "--report", str(report)])
    assert out.exit_code in (0, 1), out.output
    assert report.exists(), out.output
    seen = _measure(browser, report, tmp_path)
    print(f"{name} {command}: page width {seen['width']} px, images {seen['loaded']}/{seen['images']} loaded")
    assert seen["width"] <= WIDTH, seen
    assert seen["images"] >= 1 and seen["loaded"] == seen["images"], seen


# ---------------------------------------------------------------------------- provenance
def _job(copied, name, **kw):
    return jobs.run(read_recipe(copied / f"{name}.toml"), **kw)


def test_provenance_hashes_the_data_file_and_counts_rows(copied):
    job = _job(copied, "quality")
    p = provenance(job)
    data = copied / "data" / "quality.csv"
    assert len(p.files) == 1
    assert p.files[0].sha256 == hashlib.sha256(data.read_bytes()).hexdigest()
    assert p.files[0].size == data.stat().st_size
    rows = len(pd.read_csv(data))
    assert p.rows_in_file == rows
    assert p.rows_used == job.task.dataset.n == rows - len(job.held_out)
    assert p.recipe_file == str(copied / "quality.toml")
    assert "seed 1" in p.holdout and "0.25" in p.holdout
    assert p.solved == f"solver {job.fit.solver}, route {job.fit.route}"
    page = report_html(job)
    assert page.index("SHA-256") < page.index("<h2>")          # provenance comes first
    assert f"{p.rows_used} used of {rows} in the data" in page and p.files[0].sha256 in page
    assert "learnopt</dt><dd>" + lo.__version__ in page


def test_provenance_without_holdout_uses_every_row(copied):
    p = provenance(_job(copied, "blend"))
    assert p.rows_used == p.rows_in_file == len(pd.read_csv(copied / "data" / "blend.csv"))
    assert p.holdout.startswith("none")


def test_a_file_pattern_is_counted_and_each_file_hashed(tmp_path):
    for k in range(3):
        (tmp_path / f"part-{k}.csv").write_text("a,b\n" + f"{k},1\n" * (k + 1))
    files, note = data_files(str(tmp_path / "part-*.csv"))
    assert len(files) == 3 and note == ""
    assert sum(f.size for f in files) == sum(p.stat().st_size for p in tmp_path.glob("part-*.csv"))
    assert all(f.sha256 == hashlib.sha256(Path(f.path).read_bytes()).hexdigest() for f in files)


def test_centres_report_has_the_provenance_block_and_its_caution(copied):
    page = report_html(_job(copied, "depots"))
    digest = hashlib.sha256((copied / "data" / "bike_stops.csv").read_bytes()).hexdigest()
    assert 'class="provenance"' in page and digest in page
    assert "<h2>Map</h2>" in page and "siting decisions" in page and "statistical estimate" not in page


# ---------------------------------------------------------------------------- pictures where they apply
PICTURES = {"coefficients and their bounds", "group means", "predicted against actual", "residual distribution",
            "margin distribution", "coverage against tau", "coefficient path", "map of the centres"}
EXPECTED = {
    "deliveries": {"coefficients and their bounds", "group means", "predicted against actual",
                   "residual distribution"},
    "blend": {"coefficients and their bounds", "predicted against actual", "residual distribution"},
    "quality": {"coefficients and their bounds", "group means", "margin distribution"},
    "energy": {"coefficients and their bounds", "predicted against actual", "residual distribution",
               "coverage against tau", "coefficient path"},
    "depots": {"map of the centres"},
}


@pytest.mark.parametrize("name", sorted(EXPECTED))
def test_each_picture_appears_only_where_it_applies(copied, name):
    page = report_html(_job(copied, name))
    shown = {alt for alt in PICTURES if f'alt="{alt}"' in page}
    assert shown == EXPECTED[name]
    if name == "quality":
        assert "<code>pass</code> (the positive label)" in page
    if name != "depots":
        assert "statistical estimate" in page


def test_bounds_from_rules_and_which_bind():
    # a blend whose first tint is capped below where it would go: the cap binds; sign rules do not
    df = pd.read_csv(RECIPES / "data" / "blend.csv")
    task = lo.regression(df, "panel", features=["ochre", "umber", "sienna", "slate"], intercept=False).require(
        "ochre >= 0", "0 <= umber <= 1", "ochre <= 0.3", "ochre + umber + sienna + slate == 1")
    fit = task.solve()
    b = simple_bounds(task, fit)
    assert b.at["ochre", "lower"] == 0 and b.at["ochre", "upper"] == pytest.approx(0.3)
    assert b.at["ochre", "upper_binding"] and not b.at["ochre", "lower_binding"]
    assert b.at["umber", "lower"] == 0 and b.at["umber", "upper"] == 1 and not b.at["umber", "upper_binding"]
    assert np.isnan(b.at["sienna", "lower"]) and np.isnan(b.at["slate", "upper"])     # the sum is no bound


def test_compare_table_keeps_its_notes_out_of_the_columns(copied, tmp_path):
    report = tmp_path / "c.html"
    CliRunner().invoke(main, ["compare", str(copied / "blend.toml"), "--solvers", "clarabel,scs",
                              "--report", str(report)])
    page = report.read_text()
    table = page[page.index("<h2>Solver comparison</h2>"):]
    table = table[:table.index("</table>")]
    assert "note" not in table and "compile_s" not in table and "seconds" in table


# ---------------------------------------------------------------------------- numbers and text
def test_numbers_are_compact_and_booleans_words():
    assert fmt(0.0826319) == "0.08263" and fmt(25.27719) == "25.28" and fmt(120.0) == "120"
    assert fmt(3.39964e-07) == "3.4e-07" and fmt(-0.0) == "0" and fmt(float("nan")) == "\u2014"
    assert fmt(True) == "yes" and fmt(np.bool_(False)) == "no" and fmt(float("inf")) == "\u221e"


def test_user_text_is_escaped(copied):
    text = (copied / "blend.toml").read_text().replace('title = "', 'title = "<i>tints</i> & ')
    (copied / "odd.toml").write_text(text)
    page = report_html(_job(copied, "odd"))
    assert "<i>tints</i>" not in page and "&lt;i&gt;tints&lt;/i&gt; &amp;" in page


def test_without_matplotlib_the_page_says_so(monkeypatch):
    monkeypatch.setitem(sys.modules, "matplotlib", None)
    assert "Plots need matplotlib" in png(lambda ax: None)
