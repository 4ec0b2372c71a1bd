"""How names are written: encoded levels as column.level, other names in braces, the replaced
forms (backtick quotes, column=level) still read with a warning, and names that would mean two
things refused. The spellings are learnopt's own; the checks are common practice (each name
maps to one coefficient, or is refused)."""
import json
import re
import unicodedata
import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

import learnopt as lo
from learnopt.rules.reading import written


@pytest.fixture
def df():
    rng = np.random.default_rng(4)
    n = 90
    d = pd.DataFrame({"a": rng.normal(size=n), "unit price": rng.normal(size=n),
                      "region": rng.choice(["east", "north", "south"], n),
                      "shop": rng.choice(["{north}", "plain"], n)})
    d["y"] = d.a - 0.5 * d["unit price"] + d.region.map({"east": 0.0, "north": 0.4, "south": -0.6}) \
        + rng.normal(scale=0.3, size=n)
    return d


def only(A: np.ndarray) -> list[int]:
    """Columns a requirement row uses."""
    return list(np.flatnonzero(np.asarray(A).ravel()))


def test_encoded_levels_are_named_column_dot_level(df):
    t = lo.regression(df, "y", features=["a", "unit price", "region"])
    assert t.features == ("a", "unit price", "region.north", "region.south")   # east is the reference
    fit = t.solve()
    assert list(fit.coef.index) == list(t.features)


def test_dotted_and_braced_names_in_rules(df):
    t = lo.regression(df, "y", features=["a", "unit price", "region"])
    with warnings.catch_warnings():
        warnings.simplefilter("error")                      # the new forms warn about nothing
        ruled = t.require("region.south >= 0", "{region.north} <= 0.1", "{unit price} >= 0",
                          "region.east <= region.south", "prediction >= -5 where shop == '{north}'")
    fit = ruled.solve()
    assert fit.status == "optimal", fit.message
    assert fit.coef["region.south"] >= -1e-8 and fit.coef["region.north"] <= 0.1 + 1e-8
    assert fit.coef["unit price"] >= -1e-8
    # the braces inside the quoted level select the rows of that level, not a name
    assert ruled.requirements[-1].rows == int((df.shop == "{north}").sum())
    one = ruled.requirements[0]
    assert only(one.A) == [t.features.index("region.south")]


def test_braces_are_only_quotes(df):
    t = lo.regression(df, "y", features=["a", "region"])
    for text, fragment in [("{a >= 0", "never closed"), ("a} >= 0", "closes no"), ("{} >= 0", "empty"),
                           ("{a{b} >= 0", "cannot nest"), ("{a, b} >= 0", "unknown name 'a, b'")]:
        with pytest.raises(lo.DataError, match=fragment):
            t.require(text)
    with pytest.raises(lo.DataError, match="holds a brace"):
        lo.rule.bounds(**{"x{1}": (0, 1)}).compile(t.context())
    with pytest.raises(lo.DataError, match="where' condition reads data columns.*region == 'south'"):
        t.require("prediction >= 0 where region.south == 1")


def test_old_forms_still_work_with_a_warning(df):
    t = lo.regression(df, "y", features=["a", "unit price", "region"])
    new = t.require("region.south >= 0.1", "{unit price} >= 0").solve()
    with pytest.warns(lo.OldSpellingWarning, match=r"write '\{unit price\} >= 0'"):
        quoted = t.require("`unit price` >= 0")
    with pytest.warns(lo.OldSpellingWarning, match="write region.south for {region=south}"):
        level = t.require("{region=south} >= 0.1")
    with pytest.warns(DeprecationWarning) as caught:
        both = t.require("`region=south` >= 0.1")
    assert len(caught) == 2 and all(issubclass(w.category, lo.OldSpellingWarning) for w in caught)
    for task in (quoted, level, both):
        assert task.requirements[0].A.tolist() in [r.A.tolist() for r in new.task.requirements]
    with pytest.warns(lo.OldSpellingWarning):
        old = t.require("{region=south} >= 0.1", "`unit price` >= 0").solve()
    assert old.objective == pytest.approx(new.objective, rel=1e-9)


def test_a_column_named_like_a_level_is_refused_naming_both(df):
    clash = df.assign(**{"region.north": 1.0})
    for features in (None, ["a", "region"]):          # as a feature, or only as a data column
        with pytest.raises(lo.DataError) as info:
            lo.regression(clash, "y", features=features)
        message = str(info.value)
        assert "data column 'region.north'" in message and "level 'north' of column 'region'" in message
    # two encoded columns whose levels would share a name
    twin = df.assign(**{"region.n": "x"}).assign(region=df.region.replace({"north": "n.x"}))
    with pytest.raises(lo.DataError, match="level 'x' of column 'region.n'"):
        lo.regression(twin, "y")
    # the old spelling of a level that is also a real column's name: refused, not guessed
    old = df.assign(**{"region=north": np.linspace(0, 1, len(df))})
    t = lo.regression(old, "y", features=["a", "region", "region=north"])
    with pytest.raises(lo.DataError, match="both a coefficient and the old spelling of level region.north"):
        t.require("{region=north} >= 0")
    assert only(t.require("region.north >= 0").requirements[0].A) == [t.features.index("region.north")]


def test_a_model_file_of_schema_1_loads_with_the_names_of_today(tmp_path, df):
    fit = (lo.regression(df, "y", features=["a", "unit price", "region"])
           .penalize(lo.penalty.group(0.02, [["region.north", "region.south"]]),
                     lo.penalty.l1(0.01, factors={"region.north": 0.5}))
           .require("region.south >= 0").solve())
    fit.save(tmp_path / "new.json")
    data = json.loads((tmp_path / "new.json").read_text())
    assert data["schema_version"] == 2
    # what a schema-1 writer wrote: levels named column=level, rules in backticks
    old = json.loads(json.dumps(data).replace("region.north", "region=north").replace("region.south", "region=south"))
    old["schema_version"] = 1
    old["task"]["rules"] = ["`region=south` >= 0"]
    (tmp_path / "old.json").write_text(json.dumps(old))
    back = lo.load_fit(tmp_path / "old.json")
    assert list(back.coef.index) == ["a", "unit price", "region.north", "region.south"]
    assert back.task.penalties == fit.task.penalties
    assert back.task.dataset.encoding.names == fit.task.dataset.encoding.names
    pd.testing.assert_series_equal(back.predict(df), fit.predict(df), check_exact=True)
    assert any("schema 1" in note for note in back.task.dataset.notes)
    # a schema-1 file whose column is named like a level of today is refused
    old["task"]["features"][0] = old["task"]["encoding"]["names"][0] = "region.north"
    old["coef"] = {("region.north" if k == "a" else k): v for k, v in old["coef"].items()}
    (tmp_path / "clash.json").write_text(json.dumps(old))
    with pytest.raises(lo.DataError, match="named 'region.north' beside the level written 'region=north'"):
        lo.load_fit(tmp_path / "clash.json")


RESERVED = {"y", "intercept", "prediction"}
names = st.text(st.characters(codec="utf-8", exclude_characters="{}\x00"), min_size=1, max_size=8)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(column=names, number=names, levels=st.lists(names, min_size=2, max_size=4, unique=True),
       shape=st.sampled_from(["free", "dotted", "clash"]))
def test_every_name_means_exactly_one_coefficient(column, number, levels, shape):
    # common practice: a named design column must be addressable, and only it
    if shape == "dotted":
        column = f"{number}.{column}"                 # dots inside the encoded column's own name
    elif shape == "clash":
        number = f"{column}.{levels[-1]}"             # a number column named like a level
    assume(column != number and not {column, number} & RESERVED)
    rng = np.random.default_rng(0)
    n = 40
    frame = pd.DataFrame({column: [levels[i % len(levels)] for i in range(n)], number: rng.normal(size=n),
                          "y": rng.normal(size=n)})
    taken = {f"{column}.{v}" for v in levels}
    nfkc = [unicodedata.normalize("NFKC", c) for c in (column, number, "y")]
    if len(set(nfkc)) < 3 or any(re.fullmatch(r"__\w+__", c) or c in ("intercept", "prediction") for c in nfkc[:2]):
        with pytest.raises(lo.DataError, match="differ only in Unicode form|named like words learnopt uses"):
            lo.regression(frame, "y")
        return
    if number in taken:
        with pytest.raises(lo.DataError, match="would stand for both"):
            lo.regression(frame, "y")
        return
    t = lo.regression(frame, "y")
    assert len(set(t.features)) == len(t.features) == len(levels)     # one reference level dropped
    for j, name in enumerate(t.features):
        req = t.require(f"{written(name)} >= -10").requirements[-1]
        assert only(req.A) == [j], name


# ---------------------------------------------------------------- names and values that used to give wrong optimal answers
@pytest.mark.parametrize("scale", [1e-170, 1e-200, 1e160])
def test_columns_beyond_double_precision_are_refused_with_the_column_named(scale):
    # common practice (IEEE 754 double precision): squares of numbers below ~1e-154 underflow and
    # above ~1e154 overflow; learnopt refuses such columns instead of treating them as constant
    rng = np.random.default_rng(0)
    x = rng.normal(size=100) * scale
    frame = pd.DataFrame({"x": x, "y": rng.normal(size=100)})
    with pytest.raises(lo.DataError, match="Column 'x' has"):
        lo.regression(frame, "y").solve()
    with pytest.raises(lo.DataError, match="The target 'y' has"):
        lo.regression(frame.rename(columns={"x": "y", "y": "x"}), "y")
    rescaled = frame.assign(x=frame["x"] / scale)                 # the fix the message names works
    assert lo.regression(rescaled, "y").solve().status == "optimal"


def test_complex_numbers_are_refused_not_made_real():
    rng = np.random.default_rng(1)
    frame = pd.DataFrame({"x": rng.normal(size=50) + 1j * rng.normal(size=50), "y": rng.normal(size=50)})
    with pytest.raises(lo.DataError, match="Column 'x' holds complex numbers"):
        lo.regression(frame, "y")
    with pytest.raises(lo.DataError, match="complex numbers"):
        lo.regression(frame[["y"]].assign(x=1.0, y=frame["y"] + 0j), "y")
    with pytest.raises(lo.DataError, match="complex numbers"):
        lo.regression(np.c_[frame["x"].to_numpy()], frame["y"].to_numpy())


@pytest.mark.parametrize("name", ["intercept", "prediction", "__rest__", "__quoted_0__", "ｉｎｔｅｒｃｅｐｔ"])
def test_features_named_like_learnopts_own_words_are_refused(name):
    # every user name must map to exactly one coefficient: a column called 'intercept' would
    # share its name with the intercept in rules, tables and model files
    rng = np.random.default_rng(2)
    frame = pd.DataFrame({name: rng.normal(size=40), "z": rng.normal(size=40), "y": rng.normal(size=40)})
    with pytest.raises(lo.DataError, match="named like words learnopt uses itself"):
        lo.regression(frame, "y")
    assert lo.regression(frame, "y", features=["z"]).solve().status == "optimal"   # not used: no harm


@pytest.mark.parametrize("pair", [("\ufb01t", "fit"), ("x\uff11", "x1"), ("\u00c5", "A\u030a")])
def test_names_alike_after_unicode_normalisation_are_refused(pair):
    # the rule language reads names in Unicode normal form NFKC (as Python does), so two columns
    # that normalise alike could not be told apart in a rule (Unicode Standard Annex #15)
    rng = np.random.default_rng(3)
    frame = pd.DataFrame({pair[0]: rng.normal(size=30), pair[1]: rng.normal(size=30), "y": rng.normal(size=30)})
    with pytest.raises(lo.DataError, match="differ only in Unicode form"):
        lo.regression(frame, "y")


def test_a_name_with_a_character_that_only_continues_identifiers_is_written_in_braces():
    # found by the property test: U+00B7 (middle dot) may continue a Python identifier but the
    # tokenizer reads names as word characters, so such a name is written in braces
    assert written("A\u00b7") == "{A\u00b7}"
    frame = pd.DataFrame({"A\u00b7": np.arange(10.0), "y": np.arange(10.0)})
    lo.regression(frame, "y").require(f"{written('A·')} >= -10")
