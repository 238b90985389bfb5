"""The API's argument normalisation: the CLI's value syntax as Python values, and messages in
API terms (common practice for a Python face of a command line, no source)."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

import sensiv
from sensiv.api.arguments import (direct_ranges, level_of, names, option_to_keyword,
                                  prior_laws, spec_of_roles)
from sensiv.core.errors import InputError
from sensiv.sensitivity.direct_sets import RangeSpec

ROOT = Path(__file__).resolve().parents[2]
PATH = ROOT / "examples" / "irrigation.csv"   # invented demo data
ROLES = dict(outcome="maize_yield", treatment="irrigation_hours", instruments="height_m",
             controls=["plot_ha", "soil"], cluster="village")


@pytest.mark.parametrize("value, expected", [
    ("-0.02:0.02", [RangeSpec(-0.02, 0.02, "")]),
    ((-0.02, 0.02), [RangeSpec(-0.02, 0.02, "")]),
    ([(-0.02, 0.02)], [RangeSpec(-0.02, 0.02, "")]),
    (["-0.1:0.1rf", (0, 1)], [RangeSpec(-0.1, 0.1, "rf"), RangeSpec(0.0, 1.0, "")]),
    (("-0.1:0.1sd", "-1:1"), [RangeSpec(-0.1, 0.1, "sd"), RangeSpec(-1.0, 1.0, "")]),
])
def test_direct_takes_strings_tuples_and_lists(value, expected):
    assert direct_ranges(value) == expected


@pytest.mark.parametrize("value, fragment", [
    ((0.02, -0.02), "LOW 0.02 exceeds HIGH -0.02"),
    ([(-0.1, 0.1, 0.3)], "is not a range"),
    (3, "is not a range"),
    ("-0.1:0.1xy", "unknown unit suffix"),
    ((float("inf"), 1.0), "must be finite"),
])
def test_bad_direct_is_an_input_error_in_api_terms(value, fragment):
    with pytest.raises(InputError, match=fragment) as caught:
        sensiv.sweep(PATH, **ROLES, direct=value)
    assert "--direct" not in str(caught.value)
    assert "direct=" in str(caught.value)


def test_option_names_become_keywords():
    assert option_to_keyword("give --direct or --direct-polytope FILE") == \
        "give direct= or polytope= FILE"
    assert option_to_keyword("--level 2 is not in (0, 1); --prior-file x") == \
        "level= 2 is not in (0, 1); prior_file= x"


def test_names_take_a_string_or_a_list():
    assert names("a", "controls") == ("a",)
    assert names(["a", "b"], "controls") == ("a", "b")
    assert names(None, "controls") == ()
    with pytest.raises(InputError, match="controls= must hold column names"):
        names(["a", 3], "controls")
    with pytest.raises(InputError, match="controls= must be a column name or a list"):
        names(3, "controls")


def test_prior_takes_a_string_or_a_list():
    one, = prior_laws("normal:0:0.01")
    assert (one.kind, one.params) == ("normal", (0.0, 0.01))
    assert len(prior_laws(["normal:0:0.01", "uniform:-1:1"])) == 2
    with pytest.raises(InputError, match="prior= item 0.01 is not a law"):
        prior_laws([0.01])


@pytest.mark.parametrize("level", [0, 1, 1.5, "0.95", True])
def test_level_outside_the_unit_interval_is_refused(level):
    with pytest.raises(InputError, match="level="):
        level_of(level)


def test_unknown_keyword_and_missing_roles_are_named():
    with pytest.raises(InputError, match="unknown argument instrument="):
        sensiv.sweep(PATH, outcome="maize_yield", treatment="irrigation_hours",
                     instrument="height_m", direct="-0.01:0.01")
    with pytest.raises(InputError, match="outcome=, treatment= and instruments= are required"):
        sensiv.sweep(PATH, outcome="maize_yield", direct="-0.01:0.01")


def test_roles_beside_a_spec_are_refused():
    spec = spec_of_roles(ROLES)
    with pytest.raises(InputError, match="cannot be combined with spec="):
        sensiv.sweep(PATH, spec, outcome="maize_yield", direct="-0.01:0.01")


def test_absorb_and_two_way_cluster_pass_through():
    # common practice, no source: the API's roles are the CLI's
    spec = spec_of_roles({**ROLES, "controls": ["plot_ha"], "absorb": "village",
                          "cluster": ["village", "soil"]})
    assert spec.absorb == ("village",)
    assert list(spec.cluster) == ["village", "soil"]
    with pytest.raises(InputError, match="one or two column names"):
        spec_of_roles({**ROLES, "cluster": ["a", "b", "c"]})


def test_a_string_direct_is_one_range_not_its_characters():
    # the bug of issue 15: a string was iterated character by character
    result = sensiv.sweep(PATH, **ROLES, direct="-0.005:0.005")
    assert result.range_text == ("-0.005:0.005",)
    same = sensiv.sweep(PATH, **ROLES, direct=[(-0.005, 0.005)])
    assert same.union_ci == result.union_ci


def test_polars_frame_gives_the_pandas_result():
    polars = pytest.importorskip("polars")
    frame = pd.read_csv(PATH)
    from_pandas = sensiv.sweep(frame, **ROLES, direct="-0.005:0.005")
    from_polars = sensiv.sweep(polars.from_pandas(frame), **ROLES, direct="-0.005:0.005")
    assert from_polars.to_dict() == from_pandas.to_dict()


def test_other_data_is_refused_by_name():
    with pytest.raises(InputError, match="got list"):
        sensiv.sweep([1, 2, 3], **ROLES, direct="-0.005:0.005")


def test_prior_and_level_read_like_the_cli():
    result = sensiv.prior(PATH, **ROLES, prior="normal:0:0.002", level=0.9)
    assert result.to_dict()["confidence_level"] == 0.9
    with pytest.raises(InputError, match="prior=") as caught:
        sensiv.prior(PATH, **ROLES, prior=["normal:0:0.002", "normal:0:0.002"])
    assert "--prior" not in str(caught.value)
