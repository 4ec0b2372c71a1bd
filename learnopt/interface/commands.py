"""The ``learnopt`` command line: run, check, compare and path a recipe; demo (entry point:
:mod:`learnopt.interface.cli`).

Exit codes: 0 the fit is certified optimal, a placement keeps its rules, or the check passed; 1 the fit is not certified
(unverified, infeasible, unbounded, failed); 2 invalid input (recipe, data, parameters);
3 a piece is not convex; 4 no usable solver; 5 too large for the route; 6 a package is missing.
Every command takes ``--json`` for machine-readable output. Lists of names (solvers, actions)
come from their registries. A recipe that uses a key renamed in this release, or a rule written
in a replaced form (backtick quotes, ``column=level``), still runs; the new form is noted on stderr.
"""
from __future__ import annotations

import json
import os
import sys
import warnings

import pandas as pd

from learnopt.core.checks import refusal
from learnopt.core.version import __version__
from learnopt.centres.verdict import PlacementVerdict
from learnopt.core.errors import (LearnoptError, MissingDependencyError, OldSpellingWarning, ParameterError,
                                  TooLargeError)
from learnopt.core.status import CAUTION, PLACEMENT_CAUTION
from learnopt.interface import jobs
from learnopt.interface.demo import write_demo
from learnopt.interface.output_set import ANYWHERE, examine, plan
from learnopt.interface.recipes import read_recipe
from learnopt.interface.report_sure import SHOWN_GROUPS
from learnopt.solve.classes_fit import ClassesFit
from learnopt.solve.fitfile import to_dict
from learnopt.solve.standing import gauge
from learnopt.solve.solvers import REGISTRY as SOLVERS
from learnopt.core.checks import nearest

try:
    import click
    from rich import box
    from rich.console import Console
    from rich.markup import escape
    from rich.table import Table
except ImportError as exc:  # pragma: no cover - exercised only without the cli extra
    raise MissingDependencyError("The command line needs click and rich: pip install 'learnopt[cli]'.") from exc


def _console() -> Console:
    return Console(highlight=False, soft_wrap=True)


OUTCOMES = {1: "not certified", 2: "invalid input", 3: "not convex", 4: "no usable solver", 5: "too large",
            6: "a package is missing"}


def _fail(exc: LearnoptError, as_json: bool) -> None:
    if as_json:
        click.echo(json.dumps({"error": type(exc).__name__, "message": str(exc), "problems": exc.problems}))
    else:
        _console().print(f"learnopt stopped ({OUTCOMES.get(exc.exit_code, 'error')}, exit {exc.exit_code}): {exc}",
                         markup=False)
    sys.exit(exc.exit_code)


def _out_of_memory() -> TooLargeError:
    return TooLargeError("learnopt ran out of memory on this input. Give a file pattern (data.path = "
                         "\"data/part-*.csv\") to fit it in parts on a cluster, use fewer rows or columns, "
                         "or choose a route that keeps less in memory (solve.route).")


def _cell(v) -> str:
    if isinstance(v, float):
        return "0" if v == 0 else f"{v:.6g}"          # no "-0"
    return escape(str(v))


def _frame_table(frame, title: str) -> Table:
    """A table in our own plain style (a rule under the header, text left, numbers right); every
    name and value is shown literally (user text is never markup)."""
    table = Table(title=escape(str(title)), title_justify="left", box=box.SIMPLE_HEAD, show_edge=False,
                  pad_edge=False)
    table.add_column(escape(str(frame.index.name or "")), justify="left")
    for c in frame.columns:
        numeric = pd.api.types.is_numeric_dtype(frame[c]) and not pd.api.types.is_bool_dtype(frame[c])
        table.add_column(escape(str(c)), justify="right" if numeric else "left")
    for idx, row in frame.iterrows():
        table.add_row(escape(str(idx)), *[_cell(v) for v in row])
    return table


def _needs(param) -> str:
    """What a command-line value has to be, in our words."""
    kind = param.type
    if isinstance(kind, click.IntRange):
        return f"a whole number from {kind.min} to {kind.max}"
    if isinstance(kind, click.Path):
        return "a path to a file (not a folder)"
    return {"integer": "a whole number", "float": "a number"}.get(kind.name, f"a {kind.name}")


class _Commands(click.Group):
    """The command group, with command-line mistakes told in learnopt's own words (exit 2)."""

    def resolve_command(self, ctx, args):
        name = args[0] if args else ""
        if name and not name.startswith("-") and self.get_command(ctx, name) is None:
            raise click.UsageError(f"no command {name!r}{nearest(name, self.list_commands(ctx))}; "
                                   f"the commands are {', '.join(self.list_commands(ctx))}", ctx)
        return super().resolve_command(ctx, args)

    def main(self, args=None, prog_name=None, **extra):
        try:
            return super().main(args, prog_name="learnopt", standalone_mode=False, **extra)
        except click.exceptions.NoSuchOption as exc:
            known = sorted(o for p in (exc.ctx.command.params if exc.ctx else ()) for o in p.opts if o.startswith("-"))
            told = f"no option {exc.option_name}{nearest(exc.option_name, known)}"
        except click.exceptions.MissingParameter as exc:
            told = f"{exc.ctx.command_path if exc.ctx else 'the command'} needs a recipe file: learnopt COMMAND RECIPE.toml"
        except click.exceptions.BadParameter as exc:
            told = (f"{exc.param.opts[0] if exc.param and exc.param.opts else 'a value'} has to be "
                    f"{_needs(exc.param) if exc.param else 'something else'}")
        except click.exceptions.UsageError as exc:
            told = exc.message
        except click.exceptions.Abort:
            click.echo("learnopt: stopped by the user", err=True)
            sys.exit(130)
        click.echo(f"learnopt: {told} (learnopt --help lists the commands, learnopt COMMAND --help their options)",
                   err=True)
        sys.exit(2)


def _show_written(con, job) -> None:
    for path in job.written:
        con.print(f"wrote {path}", markup=False)
    if job.record:
        con.print(f"run {job.run_id}: the set is recorded in {job.record} (learnopt verify checks it)", markup=False)


def _show_centres(job, as_json: bool) -> None:
    fit = job.fit
    if as_json:
        out = {"fit": fit.to_dict(run=job.run_id), "written": job.written, "run": job.run_id, "record": job.record}
        if job.evaluation is not None:
            out["evaluation"] = json.loads(job.evaluation.to_json())
        click.echo(json.dumps(out, default=str))
        return
    con = _console()
    ev = pd.DataFrame({"value": [fit.status, f"{fit.objective:.10g}", f"{fit.violation:.3g}",
                                 str(len(fit.restarts)), f"{fit.seconds:.3f}s"]},
                      index=pd.Index(["status", "objective", "worst violation (absolute)", "restarts", "seconds"],
                                     name="evidence"))
    con.print(_frame_table(ev, job.recipe.title or "learnopt centres"))
    con.print(fit.message, markup=False)
    con.print(_frame_table(fit.centres.join(fit.loads), "centres"))
    if job.evaluation is not None:
        con.print(_frame_table(job.evaluation.to_frame("value"), "held-out points"))
    _show_written(con, job)
    con.print(PLACEMENT_CAUTION, markup=False)


def _show_classes(job, as_json: bool) -> None:
    fit = job.fit
    if as_json:
        out = {"fit": fit.to_dict(run=job.run_id), "written": job.written, "run": job.run_id, "record": job.record}
        if job.evaluation is not None:
            out["evaluation"] = job.evaluation.to_dict()
        click.echo(json.dumps(out, default=str))
        return
    con = _console()
    con.print(fit.summary(), markup=False)
    if job.evaluation is not None:
        con.print(_frame_table(job.evaluation.to_frame("value"), "held-out evaluation"))
    _show_written(con, job)


def _show(job, as_json: bool) -> None:
    if job.centres:
        return _show_centres(job, as_json)
    fit = job.fit
    if isinstance(fit, ClassesFit):
        return _show_classes(job, as_json)
    if as_json:
        out = {"fit": to_dict(fit, run=job.run_id), "written": job.written, "run": job.run_id, "record": job.record}
        if job.compare is not None:
            out["compare"] = json.loads(job.compare.to_json(orient="index"))
        if job.path is not None:
            out["path"] = json.loads(job.path.table.to_json(orient="records"))
            out["path_end"] = job.path.stopped
        if job.evaluation is not None:
            out["evaluation"] = job.evaluation.to_dict()
        if job.bootstrap is not None or job.intervals is not None:
            out["uncertainty"] = jobs.uncertainty_dict(job)
        if job.by_group is not None:
            out["by_group"] = job.by_group.to_dict()
        click.echo(json.dumps(out, default=str))
        return
    con = _console()
    ev = pd.DataFrame({"value": [fit.status, f"{fit.objective:.10g}", f"{fit.gap:.3g} (relative {fit.rel_gap:.3g})",
                                 f"{fit.violation:.3g}", fit.route, str(fit.solver),
                                 ", ".join(f"{k} {v:.3f}s" for k, v in fit.timings.as_dict().items())]},
                      index=pd.Index(["status", "objective", "certified gap", "worst violation (absolute)", "route",
                                      "solver", "timings"], name="evidence"))
    con.print(_frame_table(ev, job.recipe.title or "learnopt fit"))
    con.print(fit.message, markup=False)
    con.print(_frame_table(fit.coefficients(), "coefficients"))
    if len(fit.prices):
        standing = fit.rule_standing()
        back, room = standing[standing["holds_back"]], standing[~standing["holds_back"]]
        if len(back):
            con.print(_frame_table(back[["gain_per_unit"]].rename(columns={"gain_per_unit": "gain per unit relaxed"}),
                                   "rules holding the fit back"))
        if len(room):
            shown_room = pd.DataFrame({"room left": room["room"], "share of the limit": room["room_share"].map(gauge)})
            con.print(_frame_table(shown_room, "rules with room to spare"))
    if len(fit.conflicts):
        cf = fit.conflicts.to_frame("must move by")
        cf.index.name = "rule"
        con.print(_frame_table(cf, "conflicting rules (each alone, in its own units)"))
    if fit.attempts:
        con.print(_frame_table(fit.attempt_table()[["outcome", "seconds"]], "solver attempts"))
    if job.compare is not None:
        cols = [c for c in ("status", "objective", "gap", "steps", "total_s", "max_coef_diff")
                if c in job.compare.columns]
        con.print(_frame_table(job.compare[cols], "solver comparison"))
    if job.path is not None:
        walk = job.path.table.assign(strength=job.path.table["strength"].map(lambda v: f"{v:.4g}"))
        con.print(_frame_table(walk.set_index("strength")[["status", "objective", "gap", "nonzero"]],
                               "path"))
        con.print(f"the path ends here: {job.path.stopped}", markup=False)
    if job.evaluation is not None:
        con.print(_frame_table(job.evaluation.metrics.to_frame("value"), "held-out evaluation"))
        if job.evaluation.rules is not None and len(job.evaluation.rules):
            con.print(_frame_table(job.evaluation.rules.drop(columns="note"), "rules on the held-out rows"))
    _show_sure(con, job)
    if job.by_group is not None:
        g = job.by_group
        shown = g.table.drop(columns=["message", "rules_left_out"]).head(SHOWN_GROUPS)
        con.print(_frame_table(shown, f"one fit per {g.column}: {g.certified} of {len(g.table)} certified, "
                                      f"{g.seconds:.1f} s" + (f" (first {SHOWN_GROUPS} shown)"
                                                              if len(g.table) > SHOWN_GROUPS else "")))
    _show_written(con, job)
    con.print(CAUTION, markup=False)


def _show_sure(con, job) -> None:
    """Refit intervals and prediction intervals on the terminal."""
    boot = job.bootstrap
    if boot is not None:
        iv = boot.intervals.assign(flagged=boot.intervals["flagged"].map({True: "on an edge", False: ""}))
        con.print(_frame_table(iv, f"refit intervals ({boot.level:.0%}; {boot.certified} of {boot.n} refits "
                                   f"certified, {boot.seconds:.1f} s)"))
        if len(boot.rules):
            con.print(_frame_table(boot.rules, "share of refits in which each rule binds"))
        con.print(boot.caution(), markup=False)
    if job.intervals is not None:
        c = job.coverage
        facts = pd.DataFrame({"value": [job.intervals.method, c["level"], f"{job.intervals.margin:.4g}",
                                        job.intervals.calibration_rows, c["rows"], f"{c['covered']:.3g}",
                                        "{:.3g} to {:.3g}".format(*c["usual_range"])]},
                             index=pd.Index(["method", "level asked for", "margin", "calibration rows",
                                             "rows checked", "coverage measured", "usual range on those rows"],
                                            name="prediction intervals"))
        con.print(_frame_table(facts, "prediction intervals (held-out rows, split in two)"))


def _read(reader, *args, **options):
    """``reader(*args, **options)``; learnopt's deprecation notes (renamed recipe keys, rules in a
    replaced form) go to stderr, each once."""
    home = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        out = reader(*args, **options)
    seen = set()
    for w in caught:
        key = (w.category, str(w.message), w.filename, w.lineno)
        if key in seen:
            continue
        seen.add(key)
        if issubclass(w.category, OldSpellingWarning) or (
                issubclass(w.category, DeprecationWarning) and os.path.abspath(w.filename).startswith(home)):
            click.echo(f"note: {w.message}", err=True)
        else:
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    return out


def _run(recipe_path, as_json, report, anywhere, **overrides):
    try:
        recipe = _read(read_recipe, recipe_path)
        before = examine(recipe)
        if before.run is not None and not before.whole:
            click.echo(f"note: the outputs recorded in {before.record} (run {before.run}) are no longer one set; "
                       f"this run replaces them:", err=True)
            for line in before.problems:
                click.echo(f"  - {line}", err=True)
        job = _read(jobs.run, recipe, report=report, anywhere=anywhere, **overrides)
    except LearnoptError as exc:
        _fail(exc, as_json)
    except MemoryError:
        _fail(_out_of_memory(), as_json)
    _show(job, as_json)
    sys.exit(0 if job.ok else 1)


_json = click.option("--json", "as_json", is_flag=True, help="Machine-readable output.")
_report = click.option("--report", type=click.Path(dir_okay=False), default=None,
                       help="Write a self-contained HTML report here (any folder; never onto the data, "
                            "another output or a non-regular file).")
_anywhere = click.option(ANYWHERE, "anywhere", is_flag=True,
                         help="Let the recipe's [outputs] be written outside the recipe's folder.")


@click.group(cls=_Commands, help="learnopt: convex learning tasks with rules, solved and certified.")
@click.version_option(__version__, "--version", prog_name="learnopt", message="%(prog)s %(version)s")
def main():
    pass


@main.command(help="Solve a recipe and show the evidence and coefficients.")
@click.argument("recipe", type=click.Path(dir_okay=False))
@_json
@_report
@_anywhere
def run(recipe, as_json, report, anywhere):
    _run(recipe, as_json, report, anywhere)


@main.command(help="Check a recipe (validation, outputs, data, convexity) without solving.")
@click.argument("recipe", type=click.Path(dir_okay=False))
@_json
@_anywhere
def check(recipe, as_json, anywhere):
    try:
        parsed = _read(read_recipe, recipe)
        plan(parsed, anywhere=anywhere)          # where a run would write: checked here too
        task, split = _read(jobs.training_task, parsed)
        verdict = task.check()
    except LearnoptError as exc:
        _fail(exc, as_json)
    except MemoryError:
        _fail(_out_of_memory(), as_json)
    if split:
        verdict.data.insert(0, split)
    placing = isinstance(verdict, PlacementVerdict)
    if as_json:
        click.echo(json.dumps(verdict.as_dict() if placing else
                              {"convex": verdict.convex, "problem_class": verdict.problem_class,
                               "pieces": verdict.pieces, "reasons": verdict.reasons, "data": verdict.data}))
    else:
        _console().print(str(verdict), markup=False)
    if placing:                # a placement is never convex as a whole; it is ready, or a centre has no place
        sys.exit(0 if verdict.ready else 1)
    sys.exit(0 if verdict.convex else 3)


@main.command(help="Solve a recipe with several solvers and compare them.")
@click.argument("recipe", type=click.Path(dir_okay=False))
@click.option("--solvers", default=None,
              help=f"Comma-separated, from {','.join(SOLVERS)} (default: the recipe's do.solvers).")
@_json
@_report
@_anywhere
def compare(recipe, solvers, as_json, report, anywhere):
    names = [s.strip().lower() for s in solvers.split(",") if s.strip()] if solvers else None
    unknown = [n for n in names or () if n not in SOLVERS]
    if unknown:
        hint = nearest(unknown[0], SOLVERS, n=1)
        _fail(ParameterError(f"--solvers names unknown solvers {', '.join(unknown)}.{hint} "
                             f"Known solvers: {', '.join(SOLVERS)}."), as_json)
    _run(recipe, as_json, report, anywhere, action="compare", solvers=names)


@main.command(help="Walk a grid of penalty strengths and show the path table.")
@click.argument("recipe", type=click.Path(dir_okay=False))
@click.option("--grid", default=None, help="Comma-separated strengths (default: from the zeroing strength down).")
@click.option("--n", "count", type=click.IntRange(2, 500), default=None, help="Number of strengths.")
@_json
@_report
@_anywhere
def path(recipe, grid, count, as_json, report, anywhere):
    values = None
    if grid:
        try:
            values = [float(v) for v in grid.split(",") if v.strip()]
        except ValueError:
            _fail(refusal("learnopt path", "--grid", grid, "comma-separated numbers, e.g. 1,0.1,0.01"), as_json)
    _run(recipe, as_json, report, anywhere, action="path", grid=values, n=count)


@main.command(help="Write the bundled demo (invented data + recipe) to a folder and run it.")
@click.option("--folder", type=click.Path(file_okay=False), default="learnopt-demo", show_default=True)
@_json
@_report
@_anywhere
def demo(folder, as_json, report, anywhere):
    try:
        recipe = write_demo(folder)
    except LearnoptError as exc:
        _fail(exc, as_json)
    _run(recipe, as_json, report, anywhere)       # the recipe names its own report (out/...)


@main.command(help="Say whether the outputs of a recipe's last run are still one whole set.")
@click.argument("recipe", type=click.Path(dir_okay=False))
@_json
def verify(recipe, as_json):
    try:
        state = examine(_read(read_recipe, recipe))
    except LearnoptError as exc:
        _fail(exc, as_json)
    if as_json:
        click.echo(json.dumps(state.as_dict()))
    elif state.whole:
        click.echo(f"whole: the {len(state.files)} files recorded in {state.record} are all from run {state.run}")
    else:
        click.echo(f"not one set ({state.record}):")
        for line in state.problems:
            click.echo(f"  - {line}")
    sys.exit(0 if state.whole else 1)


if __name__ == "__main__":  # pragma: no cover
    main()
