"""Column labels and their units (sensiv.core.labels).

The unit rule is sensiv's own (documented in the README, "Labels and units"); the English
plural rule is common practice, no source.
"""

from __future__ import annotations

import pytest

from sensiv.core import labels
from sensiv.core.errors import InputError


def test_parse_pairs_and_mapping_agree():
    from_cli = labels.parse(["y=Maize yield (t/ha)", "x=Irrigation (hours)"])
    from_api = labels.parse({"y": "Maize yield (t/ha)", "x": "Irrigation (hours)"})
    assert from_cli == from_api
    assert from_cli.to_dict() == {"y": "Maize yield (t/ha)", "x": "Irrigation (hours)"}


def test_text_after_the_first_equals_sign_is_the_label():
    assert labels.parse(["x=a = b"]).get("x") == "a = b"


@pytest.mark.parametrize("values, fragment", [
    (["x"], "is not COLUMN=TEXT"),
    (["=Irrigation"], "the column before '=' is empty"),
    (["x= "], "the label of column 'x' is empty"),
    (["x=a", "x=b"], "labelled twice"),
    (["x=" + "a" * 81], "at most 80 characters"),
    ("x=a", "give a list"),
])
def test_bad_labels_are_refused_with_the_fix(values, fragment):
    with pytest.raises(InputError, match=fragment.replace("(", r"\(")):
        labels.parse(values)


def test_a_label_of_a_column_the_model_does_not_use_is_named():
    parsed = labels.parse(["x=Irrigation", "wage=Wage"])
    with pytest.raises(InputError, match="'wage'") as caught:
        labels.check_columns(parsed, ["y", "x", "z"])
    assert "'x'" not in str(caught.value).split("model")[0]   # only the unknown one is blamed


@pytest.mark.parametrize("label, stem, unit", [
    ("Maize yield (t/ha)", "Maize yield", "t/ha"),
    ("Log wage (log points)", "Log wage", "log points"),
    ("Village height", "Village height", None),
    ("Yield (t/ha) by plot", "Yield (t/ha) by plot", None),   # unit only when trailing
    ("Score ()", "Score ()", None),
])
def test_a_trailing_parenthesis_is_the_unit(label, stem, unit):
    assert labels.split_unit(label) == (stem, unit)


@pytest.mark.parametrize("unit, after_per", [
    ("hours", "hour"), ("years", "year"), ("inches", "inch"), ("categories", "category"),
    ("km", "km"), ("%", "%"), ("log points", "log point"), ("kbps", "kbps"),
    ("US$", "US$"), ("degrees Celsius", "degrees Celsius"),
])
def test_the_unit_after_per_is_singular(unit, after_per):
    assert labels.singular(unit) == after_per


def test_effect_unit_is_outcome_unit_per_treatment_unit():
    with labels.using(labels.parse(["y=Maize yield (t/ha)", "x=Irrigation (hours)",
                                    "x2=Fertiliser"])):
        assert labels.effect_unit("y", "x") == "t/ha per hour"
        assert labels.effect_unit("y", "x2") == "t/ha per unit of Fertiliser"
        assert labels.axis_label("β, ", "x", "y") == "β, effect of Irrigation (t/ha per hour)"
        assert labels.effect_words("x", "y") == ("effect of Irrigation (hours) on Maize yield "
                                                 "(t/ha)")
    with labels.using(labels.parse(["x=Irrigation (hours)"])):
        assert labels.effect_unit("y", "x") == "outcome units per hour"
    assert labels.effect_unit("y", "x") is None          # no labels in force
    assert labels.axis_label("β, ", "x", "y") == "β, effect of x"


def test_using_restores_and_none_keeps_the_labels_in_force():
    outer = labels.parse(["x=Outer"])
    with labels.using(outer):
        with labels.using(labels.parse(["x=Inner"])):
            assert labels.name("x") == "Inner"
        with labels.using(None):
            assert labels.name("x") == "Outer"
        assert labels.name("x") == "Outer"
    assert labels.name("x") == "x"


def test_leading_relabels_only_a_labelled_first_word():
    with labels.using(labels.parse(["educ=Schooling (years)"])):
        assert labels.leading("educ effect > 0") == "Schooling effect > 0"
        assert labels.leading("none at zero") == "none at zero"
        assert labels.leading("educated guess", "educ") == "educated guess"


def test_document_carries_the_labels_and_keeps_the_keys():
    with labels.using(labels.parse(["x=Irrigation"])):
        assert labels.document({"focus": "x"}) == {"focus": "x", "labels": {"x": "Irrigation"}}
    assert labels.document({"focus": "x"})["labels"] == {}
