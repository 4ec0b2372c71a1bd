"""Where a report came from: when it was written, by which learnopt, from which recipe and data
file (its size and SHA-256), how many rows were used of how many, how rows were held out, and
how the fit was solved. Read once when the report is written; shown first on the page."""
from __future__ import annotations

import glob
import html
import os
from dataclasses import dataclass
from datetime import datetime

from learnopt.core.files import sha256_of
from learnopt.core.version import __version__
from learnopt.data.gateway import is_sharded_source

HASH_LIMIT = 256 * 2 ** 20     # a file pattern is hashed file by file only up to this total size
LISTED_FILES = 20              # and only when it has at most this many files


@dataclass(frozen=True)
class DataFile:
    """One file read: its path, size in bytes, and SHA-256 (hex; None when not hashed)."""

    path: str
    size: int
    sha256: str | None


@dataclass(frozen=True)
class Provenance:
    """The facts shown at the top of a report (see the module text)."""

    written: str
    version: str
    recipe_file: str
    data: str                      # the data key as the recipe wrote it
    files: tuple[DataFile, ...]
    hash_note: str                 # why files were not hashed, or ""
    rows_used: int | None
    rows_in_file: int | None
    holdout: str
    solved: str
    run: str | None = None         # the run's identifier (also in the model file and the run record)

    @property
    def total_size(self) -> int:
        return sum(f.size for f in self.files)


def data_files(path: str) -> tuple[tuple[DataFile, ...], str]:
    """The file (or the files a pattern matches), with sizes and hashes, and a note when a
    pattern is too large or has too many files to hash each one."""
    names = sorted(glob.glob(path)) if is_sharded_source(path) else [path]
    names = [n for n in names if os.path.isfile(n)]
    sizes = [os.path.getsize(n) for n in names]
    several = is_sharded_source(path)
    hashed = not several or (sum(sizes) <= HASH_LIMIT and len(names) <= LISTED_FILES)
    files = tuple(DataFile(n, s, sha256_of(n) if hashed else None) for n, s in zip(names, sizes))
    note = "" if hashed else (f"files not hashed: {len(names)} files, {size_text(sum(sizes))} "
                              f"(each is hashed when there are at most {LISTED_FILES} files "
                              f"and {size_text(HASH_LIMIT)} in all)")
    return files, note


def size_text(size: int) -> str:
    """Bytes in a short form: 6,524 bytes, 37.1 kB, 2.40 MB."""
    if size < 10_000:
        return f"{size:,} bytes"
    for unit, step in (("kB", 1e3), ("MB", 1e6), ("GB", 1e9)):
        if size < step * 1000 or unit == "GB":
            return f"{size / step:.3g} {unit}"
    return f"{size} bytes"          # pragma: no cover - the loop always returns


def holdout_text(recipe) -> str:
    hold = recipe.do.holdout
    if hold is None:
        return "none: every row of the file trains the fit"
    if hold.path is not None:
        return f"the rows of the held-out file {hold.path!r}"
    return f"a random {hold.fraction:g} of the rows (seed {hold.seed})"


def solved_text(job) -> str:
    fit, s = job.fit, job.recipe.solve
    if job.centres:
        return f"{s.restarts} seeded restarts from seed {s.seed}; the best kept"
    if fit is None:
        return "not solved"
    return f"solver {fit.solver or 'none'}, route {fit.route or 'none'}"


def provenance(job) -> Provenance:
    """The provenance of ``job``, read now (the data files are hashed here)."""
    recipe = job.recipe
    files, note = data_files(recipe.resolve(recipe.data.path))
    return Provenance(written=datetime.now().astimezone().strftime("%Y-%m-%d %H:%M %Z"), version=__version__,
                      recipe_file=recipe.file or "(not read from a file)", data=recipe.data.path, files=files,
                      hash_note=note, rows_used=job.rows_used, rows_in_file=job.rows_in_file,
                      holdout=holdout_text(recipe), solved=solved_text(job), run=getattr(job, "run_id", None))


def _count(n: int | None) -> str:
    return "unknown" if n is None else f"{n:,}"


def provenance_html(p: Provenance) -> str:
    """The provenance block: a two-column list of facts, file hashes in full (they wrap)."""
    esc = html.escape
    if len(p.files) == 1:
        f = p.files[0]
        data = (f"<code>{esc(p.data)}</code> ({size_text(f.size)})"
                f"<br><span class=\"hash\">SHA-256 <code>{f.sha256}</code></span>")
    else:
        data = f"<code>{esc(p.data)}</code>: {len(p.files)} files, {size_text(p.total_size)} in all"
        if p.hash_note:
            data += f"<br><span class=\"note\">{esc(p.hash_note)}</span>"
        elif p.files:
            data += ("<details><summary>SHA-256 of each file</summary><ul class=\"hashes\">" + "".join(
                f"<li><code>{esc(os.path.basename(f.path))}</code> ({size_text(f.size)}) "
                f"<code>{f.sha256}</code></li>" for f in p.files) + "</ul></details>")
    rows = [("written", esc(p.written)), ("learnopt", esc(p.version)),
            ("recipe", f"<code>{esc(p.recipe_file)}</code>"), ("data", data),
            ("rows", f"{_count(p.rows_used)} used of {_count(p.rows_in_file)} in the data"),
            ("held out", esc(p.holdout)), ("solved by", esc(p.solved))]
    if p.run:
        rows.append(("run", f"<code data-learnopt-run=\"{esc(p.run)}\">{esc(p.run)}</code>"))
    return ("<dl class=\"provenance\">" + "".join(f"<dt>{k}</dt><dd>{v}</dd>" for k, v in rows) + "</dl>")
