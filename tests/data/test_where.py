"""The row-filter language: tokenizer, parser (precedence, parentheses, every operator, errors
with their position), evaluation on frames, and the filter on in-memory and streamed sources.

Sources of the checks:

* the meaning of each operator is checked against pandas' own boolean indexing of the same
  frame (reference library: pandas), written independently of sensiv's evaluator;
* precedence ``not`` > ``and`` > ``or`` is the usual one of boolean algebra (common practice,
  no source), checked against Python's own ``and`` / ``or`` / ``not`` on the same truth values.
"""

from __future__ import annotations

import itertools
import warnings

import numpy as np
import pandas as pd
import pytest

from sensiv.core.errors import IdentifierWarning, InputError
from sensiv.data import Spec, from_file, from_frame
from sensiv.data.where import (Both, Compare, Either, Member, Missing, Not, check_kinds,
                               filter_columns, keep_mask, parse_filter, render, tokenize)


def frame() -> pd.DataFrame:
    return pd.DataFrame({
        "age": [17.0, 25.0, np.nan, 40.0, 65.0, 30.0],
        "region": ["north", "east", "west", "", None, "north"],
        "urban": [True, False, True, False, True, False],
        "n": [1, 2, 3, 4, 5, 6],
    })


# ------------------------------------------------------------------ parser
def test_parse_every_comparison_operator():
    for op in ("==", "!=", "<", "<=", ">", ">="):
        assert parse_filter(f"age {op} 30") == Compare("age", op, 30.0)


def test_parse_literals():
    assert parse_filter("region == 'north'") == Compare("region", "==", "north")
    assert parse_filter('region == "north"') == Compare("region", "==", "north")
    assert parse_filter("urban == true") == Compare("urban", "==", True)
    assert parse_filter("urban != false") == Compare("urban", "!=", False)
    assert parse_filter("age > -1.5e2") == Compare("age", ">", -150.0)
    assert parse_filter("`birth year` >= 1960") == Compare("birth year", ">=", 1960.0)
    assert parse_filter(r"region == 'it\'s'") == Compare("region", "==", "it's")


def test_parse_membership_and_missing():
    assert parse_filter("n in [1, 2,3]") == Member("n", (1.0, 2.0, 3.0))
    assert parse_filter("region not in ['a']") == Member("region", ("a",), True)
    assert parse_filter("age is missing") == Missing("age")
    assert parse_filter("age is not missing") == Missing("age", True)


def test_precedence_not_and_or():
    a, b, c = (Compare(name, "==", 1.0) for name in "abc")
    assert parse_filter("a == 1 or b == 1 and c == 1") == Either(a, Both(b, c))
    assert parse_filter("a == 1 and b == 1 or c == 1") == Either(Both(a, b), c)
    assert parse_filter("not a == 1 and b == 1") == Both(Not(a), b)
    assert parse_filter("not not a == 1") == Not(Not(a))
    # and / or are left-associative
    assert parse_filter("a == 1 or b == 1 or c == 1") == Either(Either(a, b), c)


def test_parentheses_override_precedence():
    a, b, c = (Compare(name, "==", 1.0) for name in "abc")
    assert parse_filter("(a == 1 or b == 1) and c == 1") == Both(Either(a, b), c)
    assert parse_filter("not (a == 1 or b == 1)") == Not(Either(a, b))
    assert parse_filter("((a == 1))") == a


def test_precedence_agrees_with_boolean_algebra():
    # common practice, no source: evaluated against Python's own not/and/or on 0/1 columns
    data = pd.DataFrame(list(itertools.product([0, 1], repeat=3)), columns=list("abc"))
    text = "a == 1 or not b == 1 and c == 1"
    expected = [bool(a or (not b and c)) for a, b, c in data.itertuples(index=False)]
    assert keep_mask(parse_filter(text), data).tolist() == expected


@pytest.mark.parametrize("text,position,words", [
    ("age >", "at the end", "expected a number"),
    ("age > 3 region", "at character 9", "expected 'and', 'or'"),
    ("(age == 1", "at the end", "expected ')'"),
    ("n in [1, 2", "at the end", "expected ',' or ']'"),
    ("n in 1", "at character 6", "expected '['"),
    ("age is", "at the end", "expected 'missing'"),
    ("30 < age", "at character 1", "expected a column name"),
    ("age ~ 3", "at character 5", "unexpected character '~'"),
    ("age == 3 and", "at the end", "expected a column name"),
    ("age 3", "at character 5", "expected a comparison"),
    ("region == north", "at character 11", "expected a number, a quoted text"),
    ("n not 3", "at character 7", "expected 'in' after 'not'"),
    ("region == 'open", "at character 11", "unexpected character"),
])
def test_syntax_errors_name_the_position(text, position, words):
    with pytest.raises(InputError) as info:
        parse_filter(text)
    message = str(info.value)
    assert position in message and words in message and repr(text) in message


def test_empty_filter_is_an_input_error():
    for text in ("", "   "):
        with pytest.raises(InputError, match="non-empty"):
            parse_filter(text)


def test_tokenizer_positions_are_one_based():
    tokens = tokenize("ab  >= 'x'")
    assert [(t.kind, t.position) for t in tokens] == [
        ("name", 1), ("op", 5), ("string", 8), ("end", 11)]


def test_render_round_trips():
    for text in ["age >= 18 and (region in ['north', 'east'] or not urban == true)",
                 "age is not missing or n not in [1, 2]", "`birth year` < 1960.5",
                 "`in` == 1 or `is` is missing or `a-b` in ['x']"]:
        tree = parse_filter(text)
        assert parse_filter(render(tree)) == tree  # names that need them keep their backquotes


def test_filter_columns_in_order():
    assert filter_columns(parse_filter("b == 1 and (a == 2 or b == 3)")) == ["b", "a"]


# ------------------------------------------------------------------ evaluation
@pytest.mark.parametrize("text,reference", [
    # reference library: pandas boolean indexing on the same frame
    ("age == 25", lambda f: f["age"] == 25),
    ("age != 25", lambda f: (f["age"] != 25) & f["age"].notna()),
    ("age < 30", lambda f: f["age"] < 30),
    ("age <= 30", lambda f: f["age"] <= 30),
    ("age > 30", lambda f: f["age"] > 30),
    ("age >= 30", lambda f: f["age"] >= 30),
    ("n in [2, 4, 9]", lambda f: f["n"].isin([2, 4, 9])),
    ("n not in [2, 4]", lambda f: ~f["n"].isin([2, 4])),
    ("region == 'north'", lambda f: f["region"] == "north"),
    ("region != 'north'", lambda f: (f["region"] != "north") & f["region"].notna()
     & (f["region"] != "")),
    ("region in ['east', 'west']", lambda f: f["region"].isin(["east", "west"])),
    ("region is missing", lambda f: f["region"].isna() | (f["region"] == "")),
    ("region is not missing", lambda f: f["region"].notna() & (f["region"] != "")),
    ("age is missing", lambda f: f["age"].isna()),
    ("urban == true", lambda f: f["urban"]),
    ("urban == false and age > 20", lambda f: ~f["urban"] & (f["age"] > 20)),
    ("not age > 30", lambda f: ~(f["age"] > 30)),
    ("age < 20 or region == 'north'", lambda f: (f["age"] < 20) | (f["region"] == "north")),
])
def test_each_operator_matches_pandas(text, reference):
    data = frame()
    expected = reference(data).fillna(False).astype(bool).to_numpy()
    assert keep_mask(parse_filter(text), data).tolist() == expected.tolist()


@pytest.mark.parametrize("text,words", [
    ("region > 'a'", "has no order"),
    ("region == 3", "holds text values but is compared with 3"),
    ("age == 'x'", "holds numeric values but is compared with 'x'"),
    ("n in [1, 'b']", "compared with 'b'"),
])
def test_type_mismatch(text, words):
    kinds = {"age": "numeric", "region": "text", "n": "numeric"}
    with pytest.raises(InputError, match=words):
        check_kinds(parse_filter(text), kinds, text, "the data")


# ------------------------------------------------------------------ sources
def model_frame(n: int = 500, seed: int = 3) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    z = rng.normal(size=n)
    x = z + rng.normal(size=n)
    out = pd.DataFrame({"y": x + rng.normal(size=n), "x": x, "z": z,
                        "age": rng.integers(15, 70, n).astype(float),
                        "region": rng.choice(["north", "east", "west"], n),
                        "g": rng.integers(1, 5, n)})
    out.loc[[3, 10, 11], "age"] = np.nan
    out.loc[[5, 6], "y"] = np.nan
    return out


WHERE = "age >= 18 and region != 'west' or age is missing"


def test_filter_counts_and_rows(tmp_path):
    data = model_frame()
    spec = Spec("y", ["x"], ["z"], controls=["region"], where=WHERE)
    keep = ((data["age"] >= 18) & (data["region"] != "west")) | data["age"].isna()
    source = from_frame(data, spec)
    chunks = list(source.chunks())
    assert sum(c.n_filtered for c in chunks) == int((~keep).sum())
    assert sum(c.n_dropped for c in chunks) == int(data.loc[keep, "y"].isna().sum())
    assert sum(len(c.values) for c in chunks) == int((keep & data["y"].notna()).sum())


def test_streamed_equals_in_memory(tmp_path):
    data = model_frame()
    path = tmp_path / "d.csv"
    data.to_csv(path, index=False)
    spec = Spec("y", ["x"], ["z"], controls=["region"], categorical=["g"], where=WHERE)
    memory = list(from_frame(data, spec).chunks())
    streamed_source = from_file(path, spec, chunk_rows=37)
    streamed = list(streamed_source.chunks())
    assert streamed_source.layout == from_frame(data, spec).layout
    np.testing.assert_array_equal(np.vstack([c.values for c in streamed]),
                                  np.vstack([c.values for c in memory]))
    assert sum(c.n_filtered for c in streamed) == sum(c.n_filtered for c in memory)
    assert sum(c.n_dropped for c in streamed) == sum(c.n_dropped for c in memory)


def test_filter_columns_are_read_but_not_roles():
    data = model_frame()
    source = from_frame(data, Spec("y", ["x"], ["z"], where="age > 30"))
    assert source.layout.columns == ("y", "x", "z")


def test_unknown_filter_column_suggests_close_names():
    with pytest.raises(InputError, match=r"row-filter column 'agee' not found.*did you mean 'age'"):
        from_frame(model_frame(), Spec("y", ["x"], ["z"], where="agee > 3"))


def test_filter_type_mismatch_on_source():
    with pytest.raises(InputError, match="holds text"):
        from_frame(model_frame(), Spec("y", ["x"], ["z"], where="region == 1"))


def test_syntax_error_raised_when_spec_is_built():
    with pytest.raises(InputError, match="at character 5"):
        Spec("y", ["x"], ["z"], where="age + 3")


def test_filter_keeping_nothing():
    with pytest.raises(InputError, match="keeps none"):
        list(from_frame(model_frame(), Spec("y", ["x"], ["z"], where="age > 1000")).chunks())


def test_filter_removes_bad_weights_before_validation():
    data = model_frame().assign(w=1.0)
    data.loc[0, "w"] = -1.0
    with pytest.raises(InputError, match="weight"):
        from_frame(data, Spec("y", ["x"], ["z"], weight="w"))
    source = from_frame(data, Spec("y", ["x"], ["z"], weight="w", where="w > 0"))
    assert sum(c.n_filtered for c in source.chunks()) == 1


# ------------------------------------------------------------------ categorical
def test_categorical_levels_sorted_as_numbers(tmp_path):
    data = model_frame().assign(g=lambda f: f["g"].map({1: 2, 2: 10, 3: 9, 4: 1}))
    spec = Spec("y", ["x"], ["z"], categorical=["g"])
    layout = from_frame(data, spec).layout
    assert layout.controls == ("g[2]", "g[9]", "g[10]")
    data.loc[7, "g"] = np.nan  # a float column in some chunks: the labels stay the same
    path = tmp_path / "g.csv"
    data.to_csv(path, index=False)
    streamed = from_file(path, spec, chunk_rows=50)
    assert streamed.layout.controls == layout.controls
    assert sum(len(c.values) for c in streamed.chunks()) == 500 - 3


def test_categorical_joins_controls_once():
    spec = Spec("y", ["x"], ["z"], controls=["g", "region"], categorical=["g", "g"])
    assert spec.controls == ("g", "region") and spec.categorical == ("g",)
    assert Spec("y", ["x"], ["z"], categorical=["g"]).controls == ("g",)


def test_identifier_warning():
    # thresholds from the issue: more than 50 distinct values and more than 5% of rows
    rng = np.random.default_rng(0)
    data = model_frame(n=2000).assign(firm=rng.integers(0, 400, 2000),
                                      few=rng.integers(0, 40, 2000),
                                      share=rng.integers(0, 90, 2000))
    with pytest.warns(IdentifierWarning, match="'firm'.*use --absorb or --categorical"):
        source = from_frame(data, Spec("y", ["x"], ["z"], controls=["firm"]))
    assert any("looks like an identifier" in note for note in source.notes)
    with warnings.catch_warnings():
        warnings.simplefilter("error", IdentifierWarning)
        # 40 distinct values (<= 50), 90 distinct values in 2000 rows (<= 5%), or categorical
        for controls, categorical in ((["few"], []), (["share"], []), ([], ["firm"])):
            quiet = from_frame(data, Spec("y", ["x"], ["z"], controls=controls,
                                          categorical=categorical))
            assert quiet.notes == ()
