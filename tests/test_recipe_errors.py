"""Recipe problems in our own words (learnopt.interface.recipe_errors).

For each kind of finding of the schema check: the key as written in the TOML file, what was
found and what to write instead appear, and none of the validation library's stock phrases
does. Checked against our own wording (common practice: assert on the user-facing text).
"""
import string
import tomllib

import pytest
from click.testing import CliRunner
from hypothesis import given, settings
from hypothesis import strategies as st
from pydantic import ValidationError
from pydantic_core import InitErrorDetails

import learnopt as lo
from learnopt.interface.commands import main
from learnopt.interface.recipe_errors import problems, toml
from learnopt.interface.recipes import Recipe, read_recipe, recipe_from

STOCK = ("Field required", "Input should be", "Extra inputs are not permitted", "errors.pydantic.dev",
         "Value error", "valid dictionary", "unable to parse", "[type=")
HEAD = "[data]\npath = 'x.csv'\n[task]\nkind = 'regression'\ntarget = 'y'\n"


def _schema_types(text: str) -> set[str]:
    """The validation library's own error types for a recipe text (to know which one a case covers)."""
    try:
        Recipe(**tomllib.loads(text))
    except ValidationError as exc:
        return {e["type"] for e in exc.errors()}
    return set()


def _lines(text: str, tmp_path) -> list[str]:
    path = tmp_path / "bad.toml"
    path.write_text(text)
    with pytest.raises(lo.DataError) as info:
        read_recipe(path)
    assert isinstance(info.value, lo.LearnoptError) and info.value.exit_code == 2
    for stock in STOCK:
        assert stock not in str(info.value), stock
    return info.value.problems


CASES = [
    # (the library's error type, recipe text, a line we write)
    ("missing", "", "data: missing; add a [data] section with at least path"),
    ("value_error", "[data]\npath = 'x.csv'\n[task]\nkind = 'regression'\n",
     'task.target: a regression recipe needs the target column (e.g. target = "price")'),
    ("missing", "[data]\npath = 'x.csv'\n[task]\ntarget = 'y'\n",
     "task.kind: missing; add kind under [task]"),
    ("missing", HEAD + "[[task.penalties]]\nstrength = 1\n",
     'task.penalties[0].name: missing; add name under this [[task.penalties]] entry (one of "l1", "l2"'),
    ("float_parsing", HEAD + "[solve]\ntol = 'small'\n",
     'solve.tol: found the text "small"; it has to be a number between 0 and 1'),
    ("float_type", HEAD + "[solve]\ntol = [1]\n", "solve.tol: found the list [1]; it has to be a number between 0 and 1"),
    ("int_from_float", HEAD + "[do]\nn = 2.5\n",
     "do.n: found 2.5; it has to be a whole number between 2 and 500, both included"),
    ("int_parsing", HEAD + "[do]\npenalty = 'first'\n",
     'do.penalty: found the text "first"; it has to be a whole number at least 0'),
    ("int_type", HEAD + "[do]\npenalty = [0]\n", "do.penalty: found the list [0]; it has to be a whole number at least 0"),
    ("string_type", "[data]\npath = 3\n[task]\nkind = 'regression'\ntarget = 'y'\n",
     "data.path: found 3; it has to be text in quotes"),
    ("string_type", HEAD + "rules = ['a >= 0', 'b <= 1', 3]\n",
     "task.rules[2]: found 3; it has to be text in quotes"),
    ("bool_parsing", HEAD + "intercept = 'maybe'\n", 'task.intercept: found the text "maybe"; it has to be true or false'),
    ("bool_type", HEAD + "[solve]\npolish = [true]\n", "solve.polish: found the list [true]; it has to be true or false"),
    ("list_type", HEAD + "features = 'a'\n",
     'task.features: found the text "a"; it has to be a list in brackets, each item text in quotes'),
    ("model_type", HEAD + "loss = 'huber'\n",
     'task.loss: found the text "huber"; it has to be a table: write it as a [task.loss] section with '
     'name = "huber", or inline: { name = "huber" }'),
    ("model_type", HEAD + "penalties = ['l1']\n",
     'task.penalties[0]: found the text "l1"; it has to be a table: write it as a [[task.penalties]] entry'),
    ("dict_type", "[data]\npath = 'x.csv'\ntypes = 'number'\n[task]\nkind = 'regression'\ntarget = 'y'\n",
     'data.types: found the text "number"; it has to be a table'),
    ("greater_than", HEAD + "[solve]\ntime_limit = -1\n", "solve.time_limit: found -1; it has to be a number above 0"),
    ("greater_than_equal", HEAD + "[do]\npenalty = -1\n", "do.penalty: found -1; it has to be a whole number at least 0"),
    ("less_than", HEAD + "[solve]\ntol = 5\n", "solve.tol: found 5; it has to be a number between 0 and 1"),
    ("less_than_equal", HEAD + "[do]\nn = 1000\n",
     "do.n: found 1000; it has to be a whole number between 2 and 500, both included"),
    ("literal_error", HEAD.replace("'regression'", "'ranking'"),
     'task.kind: found the text "ranking"; it has to be one of "regression", "classification"'),
    ("literal_error", HEAD.replace("'regression'", "'regresion'"), '(nearest known: "regression")'),
    ("literal_error", HEAD + "[do]\nsolvers = ['osqp', 'fast']\n",
     'do.solvers[1]: found the text "fast"; it has to be one of "clarabel", "osqp"'),
    ("literal_error", "[data]\npath = 'x.csv'\ntypes = { 'unit price' = 'money' }\n[task]\nkind = 'regression'\n"
                      "target = 'y'\n", 'data.types."unit price": found the text "money"; it has to be one of "number"'),
    ("extra_forbidden", HEAD + "colour = 'red'\n",
     "task.colour: unknown key; remove it or fix its spelling (the README lists every recipe key)"),
    ("extra_forbidden", HEAD + "[[task.penalties]]\nname = 'l1'\nstrenght = 1\n",
     "task.penalties[0].strenght: unknown key (nearest known: strength)"),
    ("value_error", HEAD + "[do.holdout]\nfraction = 0.2\npath = 'h.csv'\n",
     "do.holdout: give exactly one of 'path' (a held-out file) or 'fraction' (a random split)"),
    ("value_error", HEAD + "[task.loss]\nname = 'huber'\ndelta = -1\n",
     "task.loss.delta: found -1; it has to be above 0 (huber loss)"),
    ("value_error", HEAD + "[task.loss]\nname = 'quantile'\ntau = 'high'\n",
     'task.loss.tau: found the text "high"; it has to be a number between 0 and 1 (quantile loss)'),
    ("value_error", HEAD + "[[task.penalties]]\nname = 'total_variation'\nstrength = 1\norder = ['a']\n",
     "task.penalties[0].order: found the list [\"a\"]; it has to be a list of at least two coefficient names"),
    ("string_type", HEAD + "positive = [1]\n",
     "task.positive: found the list [1]; it has to be text in quotes, a number or true/false"),
]


@pytest.mark.parametrize("kind,text,line", CASES, ids=[f"{c[0]}-{k}" for k, c in enumerate(CASES)])
def test_each_finding_names_the_key_what_was_found_and_the_fix(tmp_path, kind, text, line):
    assert kind in _schema_types(text)          # the case really covers this kind of finding
    found = _lines(text, tmp_path)
    assert any(line in p for p in found), found


def test_every_problem_is_listed_at_once_in_file_order(tmp_path):
    text = ("[data]\npath = 3\ncolour = 'red'\n[task]\nkind = 'ranking'\ntarget = 'y'\n"
            "[task.loss]\nname = 'huber'\ndelta = -1\n[solve]\ntol = 5\n[do]\nn = 1.5\n")
    found = _lines(text, tmp_path)
    assert [p.split(":")[0] for p in found] == ["data.path", "data.colour", "task.kind", "task.loss.delta",
                                                 "solve.tol", "do.n"]
    out = CliRunner().invoke(main, ["check", str(tmp_path / "bad.toml")])
    assert out.exit_code == 2 and "has 6 problems" in out.output
    assert not any(stock in out.output for stock in STOCK)


def test_a_folder_key_is_reported_not_a_python_type_error(tmp_path):
    assert _lines(HEAD.replace("[data]", "folder = '/tmp'\n[data]"), tmp_path) == [
        "folder: unknown key; remove it (learnopt sets it: paths in a recipe are read relative to the recipe file)"]


def test_findings_outside_the_table_still_never_use_the_library_words():
    # an error type the reader has no words of its own for: the key, what was found and what the
    # schema says the key holds; with no schema type to read, a pointer to the recipe reference
    for loc, expect in ((("solve", "tol"), "solve.tol: found 5; it has to be a number between 0 and 1"),
                        (("task", "loss", "delta"), "task.loss.delta: found 5, which this key does not take")):
        exc = ValidationError.from_exception_data("Recipe", [InitErrorDetails(type="uuid_type", loc=loc, input=5)])
        (line,) = problems(exc, Recipe, set())
        assert line.startswith(expect) and not any(stock in line for stock in STOCK)
    exc = ValidationError.from_exception_data("Recipe", [InitErrorDetails(
        type="greater_than", loc=("task", "loss", "delta"), input=-2, ctx={"gt": 0})])
    assert problems(exc, Recipe, set()) == ["task.loss.delta: found -2; it has to be above 0"]


def test_values_are_shown_as_the_recipe_writes_them():
    assert toml(True) == "true" and toml("a") == '"a"' and toml([1, "b"]) == '[1, "b"]'
    assert toml({"a b": 1, "c": [False]}) == '{ "a b" = 1, c = [false] }'
    assert toml(float("nan")) == "nan" and toml(-float("inf")) == "-inf"
    assert toml("x" * 200).endswith("...") and len(toml("x" * 200)) <= 72


# ---------------------------------------------------------------- random wrong-typed values
WORDS = st.text(string.ascii_letters, min_size=2, max_size=6).filter(
    lambda w: w.lower() not in {"true", "false", "yes", "no", "on", "off", "inf", "nan", "infinity"})
NUMBERS = st.one_of(st.integers(-10**6, 10**6), st.floats(allow_nan=False, allow_infinity=False))
TABLES = st.dictionaries(WORDS, st.integers(0, 9), min_size=1, max_size=2)
LISTS = st.lists(st.integers(0, 9), min_size=1, max_size=3)
# a key of each type, and values the schema refuses for it (lax coercions such as "1" -> 1 left out)
WRONG = {
    ("solve", "tol"): st.one_of(WORDS, LISTS, TABLES),
    ("do", "n"): st.one_of(WORDS, LISTS, TABLES, st.floats(2.01, 499.99).filter(lambda v: v != int(v))),
    ("data", "path"): st.one_of(NUMBERS, st.booleans(), LISTS, TABLES),
    ("task", "intercept"): st.one_of(WORDS, LISTS, TABLES, st.integers(2, 10**6)),
    ("task", "features"): st.one_of(WORDS, NUMBERS, st.booleans(), TABLES),
    ("task", "loss"): st.one_of(WORDS, NUMBERS, st.booleans(), LISTS),
}


@settings(max_examples=120, deadline=None, derandomize=True)
@given(st.sampled_from(sorted(WRONG)).flatmap(lambda key: st.tuples(st.just(key), WRONG[key])))
def test_any_wrong_typed_value_gets_our_words(case):
    (section, key), value = case
    raw = {"data": {"path": "x.csv"}, "task": {"kind": "regression", "target": "y"}}
    raw.setdefault(section, {})[key] = value
    with pytest.raises(lo.DataError) as info:
        recipe_from(raw)
    (line,) = info.value.problems
    assert line.startswith(f"{section}.{key}: found {'the text ' if isinstance(value, str) else ''}"), line
    assert "; it has to be " in line
    assert not any(stock in line for stock in STOCK), line
