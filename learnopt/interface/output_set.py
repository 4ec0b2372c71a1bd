"""The outputs of a recipe run, written and checked as one set.

Before anything is solved, :func:`plan` decides where every output goes and refuses, all
problems at once, an output that would

* land outside the recipe's folder (paths are compared after following links: the real path
  of the output's folder against the real path of the recipe's folder), unless the caller
  allows it (``anywhere=True``, the command line's ``--write-anywhere``); ``--report`` is the
  user's own choice on the command line and may point anywhere;
* replace the recipe's data (``data.path``, every file its pattern matches or would match,
  ``do.holdout.path``) or the recipe file itself;
* name the same file as another output;
* replace something that is not a regular file (a folder, a device, a pipe, a socket, a link).

Every run gets an identifier (``uuid4().hex``). The model file and the HTML report carry it,
and after the last output :func:`record` writes the run record ``<recipe stem>.run.json`` next
to the first output (the model file when there is one; the recipe's folder when only
``--report`` is written): the identifier and, for every file written, its key, path (relative
to the record), size and SHA-256. :func:`examine` reads the record back and says which files
are missing, changed, or written by another run (``learnopt verify RECIPE``).
"""
from __future__ import annotations

import fnmatch
import glob
import json
import os
import re
from dataclasses import dataclass
from datetime import datetime

from learnopt.core.errors import OutputError
from learnopt.core.files import not_writable, sha256_of, write_atomic
from learnopt.data.gateway import is_sharded_source

OUTPUT_KEYS = ("fit", "coefficients", "predictions", "path", "compare", "uncertainty", "groups", "centres",
               "assignments", "report")
RECORD_KEY = "the run record"
RECORD_FORMAT = "learnopt-run-record"
ANYWHERE = "--write-anywhere"
_STAMPS = (re.compile(rb'data-learnopt-run="([0-9a-f]{32})"'), re.compile(rb'^ "run": "([0-9a-f]{32})",?$', re.M))


@dataclass(frozen=True)
class Planned:
    """One output of a run: the key that names it and the path written."""

    key: str
    path: str


def entry(path: str) -> str:
    """The folder entry a write to ``path`` replaces: its folder's real path (links followed)
    joined with its own name (a rename replaces a link itself, not what it points to)."""
    path = os.path.abspath(path)
    return os.path.join(os.path.realpath(os.path.dirname(path)), os.path.basename(path))


def inside(path: str, folder: str) -> bool:
    """Is ``path`` (its folder's real path) inside ``folder`` (its real path)?"""
    home = os.path.realpath(folder)
    return os.path.commonpath([os.path.dirname(entry(path)), home]) == home


def record_path(recipe) -> str:
    """Where a run of ``recipe`` writes its record: ``<recipe stem>.run.json`` in the folder of
    the first output the recipe names (``outputs.fit`` first), else in the recipe's folder."""
    out = recipe.outputs
    first = next((getattr(out, k) for k in OUTPUT_KEYS if getattr(out, k)), None)
    folder = os.path.dirname(recipe.resolve(first)) if first else recipe.folder
    stem = os.path.splitext(os.path.basename(recipe.file))[0] if recipe.file else "recipe"
    return os.path.join(os.path.abspath(folder), f"{stem}.run.json")


def _protected(recipe) -> list[tuple[str, str, str]]:
    """Files no output may replace: (key, path, pattern or "") for the data, the held-out file
    and the recipe file."""
    out = []
    sources = [("data.path", recipe.resolve(recipe.data.path))]
    if recipe.do.holdout is not None and recipe.do.holdout.path is not None:
        sources.append(("do.holdout.path", recipe.resolve(recipe.do.holdout.path)))
    if recipe.file:
        sources.append(("the recipe file", recipe.file))
    for key, path in sources:
        pattern = os.path.abspath(path) if is_sharded_source(path) else ""
        for name in (sorted(glob.glob(path)) if pattern else [path]):
            out.append((key, name, pattern))
        if pattern:
            out.append((key, "", pattern))
    return out


def _clash(path: str, protected) -> str | None:
    """The protected file (as a phrase naming its key) that writing ``path`` would replace."""
    mine = entry(path)
    for key, name, pattern in protected:
        if name and mine in (entry(name), os.path.realpath(name)):
            return f"{key} ({name!r})"
        if not name and (_matches(os.path.abspath(path), pattern) or _matches(mine, pattern)):
            return f"{key} (the pattern {pattern!r} would read it as data)"
    return None


def _matches(path: str, pattern: str) -> bool:
    """Would a file pattern read ``path``? Part by part as a file pattern reads it (``*`` stays
    within one folder); a pattern with ``**`` is matched whole (it may cross folders)."""
    if "**" in pattern:
        return fnmatch.fnmatchcase(path, pattern)
    ours, theirs = path.split(os.sep), pattern.split(os.sep)
    return len(ours) == len(theirs) and all(fnmatch.fnmatchcase(a, b) for a, b in zip(ours, theirs))


def plan(recipe, *, report: str | None = None, anywhere: bool = False) -> list[Planned]:
    """Every output a run of ``recipe`` may write (the run record last), checked before
    solving; every problem is listed in one :class:`OutputError` (exit code 2)."""
    out = recipe.outputs
    wanted = [(f"outputs.{k}", getattr(out, k), recipe.resolve(getattr(out, k)))
              for k in OUTPUT_KEYS if getattr(out, k) and not (k == "report" and report)]
    if report:
        wanted.append(("--report", report, os.fspath(report)))
    wanted.append((RECORD_KEY, None, record_path(recipe)))
    protected, seen, found = _protected(recipe), {}, []
    for key, given, path in wanted:
        if given is not None and key != "--report" and not anywhere and not inside(path, recipe.folder):
            link = " (a link on the way leads out)" if _lexically_inside(path, recipe.folder) else ""
            found.append(f"{key} = {given!r} would write {path!r}, outside the recipe's folder "
                         f"{os.path.abspath(recipe.folder)!r}{link}; name a path inside that folder, "
                         f"or allow other places with {ANYWHERE}")
        clash = _clash(path, protected)
        if clash:
            found.append(f"{key} = {path!r} would replace {clash}; name another file for {key}")
        other = seen.get(entry(path))
        if other is not None:
            found.append(f"{key} and {other} both name {path!r}; the second would replace the first: "
                         f"give each output a file of its own")
        seen.setdefault(entry(path), key)
        why = not_writable(path)
        if why:
            found.append(f"{key}: {why}")
    if found:
        head = (f"The run's outputs have {len(found)} problems" if len(found) > 1
                else f"The run's output cannot be written: {found[0]}")
        raise OutputError(head, problems=found)
    return [Planned(key, path) for key, _, path in wanted]


def _lexically_inside(path: str, folder: str) -> bool:
    home = os.path.abspath(folder)
    return os.path.commonpath([os.path.abspath(path), home]) == home


def record(run: str, recipe, planned: list[Planned], written: list[str]) -> str | None:
    """Write the run record (atomically, after every other output); its path, or None when the
    run wrote nothing."""
    where = next(p.path for p in planned if p.key == RECORD_KEY)
    folder = os.path.dirname(os.path.abspath(where))
    done = {os.path.abspath(p) for p in written}
    files = [{"key": p.key, "path": os.path.relpath(os.path.abspath(p.path), folder),
              "size": os.path.getsize(p.path), "sha256": sha256_of(p.path)}
             for p in planned if p.key != RECORD_KEY and os.path.abspath(p.path) in done]
    if not files:
        return None
    content = {"format": RECORD_FORMAT, "version": 1, "run": run, "recipe": recipe.file or None,
               "finished": datetime.now().astimezone().isoformat(timespec="seconds"), "files": files}
    write_atomic(where, json.dumps(content, indent=1) + "\n")
    return where


def stamp(path: str) -> str | None:
    """The run identifier a model file or report carries (None for files without one)."""
    with open(path, "rb") as fh:
        head = fh.read(2 ** 20)
    for pattern in _STAMPS:
        found = pattern.search(head)
        if found:
            return found.group(1).decode("ascii")
    return None


@dataclass(frozen=True)
class SetState:
    """What :func:`examine` found: the record's path, the run it names, whether the set is whole,
    and one line per file that is missing, changed or from another run."""

    record: str
    run: str | None
    whole: bool
    problems: tuple[str, ...]
    files: tuple[str, ...] = ()

    def as_dict(self) -> dict:
        return {"record": self.record, "run": self.run, "whole": self.whole,
                "problems": list(self.problems), "files": list(self.files)}


def examine(recipe) -> SetState:
    """Compare the files a recipe's last run recorded with what is on disk now."""
    where = record_path(recipe)
    try:
        with open(where, encoding="utf-8") as fh:
            content = json.load(fh)
    except FileNotFoundError:
        return SetState(where, None, False, (f"no run record at {where!r}: this recipe has not been run "
                                             f"(or its record was removed); run it to write a whole set",))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        return SetState(where, None, False, (f"the run record {where!r} cannot be read ({exc}); run the recipe "
                                             f"again to write a whole set",))
    content = content if isinstance(content, dict) else {}
    files, run = content.get("files"), content.get("run")
    if content.get("format") != RECORD_FORMAT or not isinstance(files, list) or not isinstance(run, str):
        return SetState(where, None, False, (f"{where!r} is not a learnopt run record; run the recipe again "
                                             f"to write a whole set",))
    folder, problems, paths = os.path.dirname(where), [], []
    for item in files:
        item = item if isinstance(item, dict) else {}
        path = os.path.normpath(os.path.join(folder, str(item.get("path"))))
        paths.append(path)
        key = item.get("key", "an output")
        if not os.path.isfile(path):
            problems.append(f"{key} {path!r}: missing")
            continue
        if os.path.getsize(path) == item.get("size") and sha256_of(path) == item.get("sha256"):
            continue
        other = stamp(path)
        problems.append(f"{key} {path!r}: " + (f"written by another run ({other}), not run {run}"
                                               if other and other != run else "changed since run " + run))
    return SetState(where, run, not problems, tuple(problems), tuple(paths))
