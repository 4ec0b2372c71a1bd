"""Every Python example in README.md runs as pasted (the front door must not lie).

The blocks are taken from the README in order; the ones without their own imports continue the
session of the block before them, as a reader pasting them one after the other would. The block
with a dask cluster runs as a script in its own process (its workers import the script).
"""
from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import matplotlib
import pytest

matplotlib.use("Agg")

README = Path(__file__).resolve().parents[1] / "README.md"
BLOCKS = re.findall(r"```python\n(.*?)```", README.read_text(encoding="utf-8"), flags=re.S)


def test_the_readme_has_python_examples():
    assert len(BLOCKS) >= 5


def test_every_in_process_example_runs(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    namespace: dict = {"__name__": "readme"}
    for k, block in enumerate(BLOCKS):
        if "__main__" in block:
            continue
        if "import learnopt" in block:
            namespace = {"__name__": "readme"}          # a block with its own imports starts afresh
        try:
            exec(compile(block, f"README block {k + 1}", "exec"), namespace)
        except Exception as exc:  # noqa: BLE001 - the message names the block
            pytest.fail(f"README block {k + 1} failed: {type(exc).__name__}: {exc}")


@pytest.mark.slow
def test_the_cluster_example_runs_as_a_script(tmp_path):
    script = [b for b in BLOCKS if "__main__" in b]
    assert script, "the README's cluster example is missing"
    (tmp_path / "example.py").write_text(script[0])
    out = subprocess.run([sys.executable, "example.py"], cwd=tmp_path, capture_output=True, text=True, timeout=600)
    assert out.returncode == 0, out.stderr[-3000:]
    assert out.stdout.split()[:2] == ["optimal", "sharded"], out.stdout
