"""Intervals at a user-chosen grid of direct effects (``sweep --at``).

Sources beside each check:
* reference library: linearmodels ``IV2SLS`` refitted on ``y − Zγ`` at the corners of the box
  ``±v`` (brute force; the union's lower end is concave in γ, so its extremes sit at corners —
  Conley, Hansen & Rossi 2012);
* common practice, no source: the value of the stated half-width reproduces the stated set's
  intervals; the identified set widens with v; unit conversion by the reduced form.
"""

from __future__ import annotations

import itertools
import warnings

import numpy as np
import pytest

from sensiv.core.errors import InputError, WeakInstrumentWarning
from sensiv.data import from_frame
from sensiv.sensitivity import bounds
from sensiv.sensitivity.at_points import parse_at

from tests.sensitivity.test_bounds import design, refit, spec_for

Z95 = 1.959963984540054   # standard normal 97.5% quantile (common practice, no source)


def run(frame, k_z, ranges, at):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        return bounds.sweep(from_frame(frame, spec_for(k_z)), direct=ranges, se="robust",
                            points=5, at=at)


@pytest.mark.parametrize("k_z", [1, 2])
def test_union_at_each_value_matches_brute_force_refits(k_z):
    frame = design(k_z=k_z, seed=7)
    res = run(frame, k_z, ["-0.01:0.01"] * k_z, "0.02,0.05")
    assert [p.given.value for p in res.at] == [0.02, 0.05]
    for p in res.at:
        v = p.given.value
        ends = []
        for corner in itertools.product((-v, v), repeat=k_z):
            beta, se = refit(frame, corner, "robust")          # reference library: linearmodels
            ends.append((beta - Z95 * se, beta + Z95 * se, beta))
        assert p.union_ci.low == pytest.approx(min(e[0] for e in ends), rel=1e-7)
        assert p.union_ci.high == pytest.approx(max(e[1] for e in ends), rel=1e-7)
        assert p.identified_set.low == pytest.approx(min(e[2] for e in ends), rel=1e-7)
        assert p.identified_set.high == pytest.approx(max(e[2] for e in ends), rel=1e-7)
        assert p.direct == (pytest.approx(v),) * k_z


def test_the_stated_half_width_reproduces_the_stated_set():
    frame = design(seed=3)
    res = run(frame, 1, ["-0.03:0.03"], [0.0, 0.03, 0.06])
    zero, same, wider = res.at
    assert same.union_ci.low == pytest.approx(res.union_ci.low, rel=1e-12)
    assert same.union_ci.high == pytest.approx(res.union_ci.high, rel=1e-12)
    assert same.bias_aware_ci.low == pytest.approx(res.bias_aware.ci.low, rel=1e-12)
    assert same.bias_aware_ci.high == pytest.approx(res.bias_aware.ci.high, rel=1e-12)
    assert zero.identified_set.low == pytest.approx(res.estimate)
    assert wider.identified_set.width > same.identified_set.width > 0
    doc = res.to_dict()["at"]
    assert [d["value"] for d in doc] == [0.0, 0.03, 0.06]
    assert doc[1]["union_ci"] == pytest.approx(res.union_ci.to_list())
    assert set(doc[0]) == {"value", "unit", "direct", "identified_set", "union_ci",
                           "bias_aware_ci"}


def test_rf_unit_is_a_share_of_each_reduced_form():
    frame = design(k_z=2, seed=9)
    res = run(frame, 2, ["-0.01:0.01"] * 2, "0.1rf")
    rf = res.scale.reduced_form
    assert res.at[0].direct == pytest.approx(tuple(0.1 * abs(rf)))
    assert res.at[0].to_dict()["unit"] == "rf"


def test_no_grid_gives_an_empty_list():
    frame = design(seed=3)
    assert run(frame, 1, ["-0.01:0.01"], None).to_dict()["at"] == []


@pytest.mark.parametrize("bad, fragment", [("abc", "not a number"), ("-0.1", "≥ 0"),
                                           ("0.1xy", "unknown unit"), ("0.1,,0.2", "not a number")])
def test_bad_grid_values_are_refused(bad, fragment):
    with pytest.raises(InputError, match=fragment):
        parse_at(bad)
