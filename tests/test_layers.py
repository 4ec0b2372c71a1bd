"""The house rules of the package layout, read from the code's own import statements.

Folders sit on layers (DEVELOPERS.md, "The map"); a module imports only from its own folder or
from a folder on a lower layer, folders on one layer do not import each other, no learnopt
import is written inside a function (so no circle can hide there), and no private name
(leading underscore) is imported from another folder. A change that breaks one of these fails
here, with the offending line named. Common practice (layered architecture), no outside source.
"""
from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "learnopt"

LAYERS = {
    "core": 0,
    "terms": 1, "rules": 1,
    "data": 2,
    "problem": 3, "scale": 3,
    "solve": 4, "centres": 4,
    "selection": 5,
    "interface": 6,
}
ALLOWED_UPWARD: set[tuple[str, str]] = set()     # (importing module, imported module): none today
# imports written inside a function on purpose: the package face imports the estimator adapter on
# first use of lo.estimator (it imports scikit-learn) and the recipe reader on first use of
# lo.load_recipe (it imports pydantic): optional extras a core install does not have
ALLOWED_LAZY = {("learnopt", "learnopt.interface.adapter"), ("learnopt", "learnopt.interface.recipes")}


def _modules():
    for path in sorted(PACKAGE.rglob("*.py")):
        rel = path.relative_to(ROOT).with_suffix("")
        parts = rel.parts[:-1] if rel.name == "__init__" else rel.parts
        yield ".".join(parts), path


def _imports(name: str, path: Path):
    """(line, imported module, imported names, inside a function) for every learnopt import."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    package = name if path.name == "__init__.py" else name.rsplit(".", 1)[0]

    def walk(node, in_function):
        for child in ast.iter_child_nodes(node):
            inner = in_function or isinstance(child, (ast.FunctionDef, ast.AsyncFunctionDef, ast.Lambda))
            if isinstance(child, ast.ImportFrom):
                if child.level:
                    base = package.split(".")[: len(package.split(".")) - child.level + 1]
                    module = ".".join(base + ([child.module] if child.module else []))
                else:
                    module = child.module or ""
                if module == "learnopt" or module.startswith("learnopt."):
                    names = [a.name for a in child.names]
                    yield child.lineno, module, names, in_function
            elif isinstance(child, ast.Import):
                for a in child.names:
                    if a.name == "learnopt" or a.name.startswith("learnopt."):
                        yield child.lineno, a.name, [], in_function
            yield from walk(child, inner)

    yield from walk(tree, False)


def _private(name: str) -> bool:
    """A leading underscore marks a private name; dunder names (``__version__``) are public."""
    return name.startswith("_") and not (name.startswith("__") and name.endswith("__"))


def _folder(module: str) -> str | None:
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else None      # None: the package face (learnopt/__init__)


def _violations():
    found = []
    for name, path in _modules():
        here = _folder(name)
        for line, module, names, in_function in _imports(name, path):
            where = f"{path.relative_to(ROOT)}:{line}"
            if in_function and (name, module) not in ALLOWED_LAZY:
                found.append(f"{where}: imports {module} inside a function; import it at the top of the module")
            there = _folder(module)
            if module == "learnopt" and here is not None:
                there = "__face__"
            if here is None or there == here:
                continue
            if there == "__face__" or there not in LAYERS:
                found.append(f"{where}: {name} imports the package face ({module}); import the module itself")
                continue
            if here not in LAYERS:
                found.append(f"{where}: folder {here!r} has no layer; add it to LAYERS and DEVELOPERS.md")
                continue
            if LAYERS[there] > LAYERS[here] and (name, module) not in ALLOWED_UPWARD:
                found.append(f"{where}: {here} (layer {LAYERS[here]}) imports {module} (layer {LAYERS[there]}), "
                             f"which is above it")
            elif LAYERS[there] == LAYERS[here]:
                found.append(f"{where}: {here} and {there} share layer {LAYERS[here]} and must not import each other")
            private = [n for n in names if _private(n)]
            if private:
                found.append(f"{where}: imports private name(s) {private} from another folder ({module})")
    return found


def test_every_folder_keeps_to_its_layer():
    problems = _violations()
    assert not problems, "\n".join(problems)


def test_every_folder_has_a_layer():
    folders = {p.name for p in PACKAGE.iterdir() if p.is_dir() and (p / "__init__.py").exists()}
    assert folders == set(LAYERS), f"folders without a layer: {folders - set(LAYERS)}; layers without a folder: {set(LAYERS) - folders}"


def test_tests_import_no_private_names_across_folders():
    problems = []
    for path in sorted((ROOT / "tests").rglob("*.py")):
        for line, module, names, _ in _imports("tests.x", path):
            private = [n for n in names if _private(n)]
            if private:
                problems.append(f"{path.relative_to(ROOT)}:{line}: imports private {private} from {module}")
    assert not problems, "\n".join(problems)


@pytest.mark.parametrize("limit", [450])
def test_no_module_is_too_long(limit):
    long = [f"{p.relative_to(ROOT)}: {n} lines" for p in PACKAGE.rglob("*.py")
            if (n := len(p.read_text(encoding="utf-8").splitlines())) > limit]
    assert not long, "modules over the size the house allows:\n" + "\n".join(long)
