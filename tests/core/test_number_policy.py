"""The number policy of sensiv.core.results (DEVELOPERS.md, "Numbers"): common practice, no
source."""

from __future__ import annotations

import math

import pytest

from sensiv.core.results import Interval, format_ends, format_number, with_article
from sensiv.present.tables import interval_text


@pytest.mark.parametrize("value", [-0.0, -1e-12, -0.00004])
def test_zero_never_has_a_sign(value):
    assert format_number(value, 1 if value == -0.00004 else 4) != "-0"
    assert not format_ends(value, -1e-15)[1].startswith("-0")
    assert "-0," not in str(Interval(value, 0.0)) and "-0]" not in str(Interval(-0.0, -0.0))


def test_an_interval_never_mixes_an_exponent_with_plain_decimals():
    assert str(Interval(7.043e-05, 0.1227)) == "[0.0001, 0.1227]"
    assert interval_text(-7.043e-05, 0.1227) == "[−0.0001, 0.1227]"
    low, high = format_ends(-0.001147, 0.02)
    assert "e" not in low + high
    assert len(low.split(".")[1]) == len(high.split(".")[1])       # common decimals


def test_four_significant_digits_on_the_larger_end():
    assert format_ends(0.132289, 0.0485213) == ("0.1323", "0.0485")
    assert format_ends(-10.0, 10.5) == ("-10.0", "10.5")
    assert format_ends(99.996, 1.0) == ("100", "1")                  # rounds up a power
    assert format_ends(0.5, 1.25) == ("0.50", "1.25")


def test_infinite_and_tiny_ends():
    assert str(Interval(-math.inf, 0.0394)) == "[-inf, 0.0394]"
    assert interval_text(-math.inf, 1.0) == "[−∞, 1]"
    assert format_ends(-1e-9, -2e-10) == ("-1e-09", "-2e-10")


def test_articles():
    assert with_article("instrument") == "an instrument"
    assert with_article("outcome") == "an outcome"
    assert with_article("treatment") == "a treatment"


def test_reports_use_four_significant_digits():
    import re
    import warnings

    from sensiv.data import from_frame
    from sensiv.present.markdown import sweep_markdown
    from sensiv.sensitivity import bounds
    from tests.sensitivity.test_bounds import design, spec_for

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = bounds.sweep(from_frame(design(seed=3), spec_for(1)), direct=["-0.01:0.01"],
                           se="robust", points=5)
    text = sweep_markdown(res)
    assert f"{format_number(res.estimate)} (se {format_number(res.se)})" in text
    # no number with more than 4 significant digits in the report's Results table
    results = text.split("## Results")[1].split("## Assumptions")[0]
    for number in re.findall(r"(?<![\w.])-?\d+\.\d+(?:e[-+]\d+)?", results):
        digits = number.lstrip("-").split("e")[0].replace(".", "").lstrip("0")
        assert len(digits) <= 4, number
