"""The documented limits and the shared checks of seeds, sizes and magnitudes.

Common practice, no source: double precision holds magnitudes up to about 1.8e308, so squares
of numbers above 1e154 overflow; the limits are sensiv's documented choices.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest

from sensiv.core.errors import InputError
from sensiv.core.limits import (MAX_MAGNITUDE, MAX_POINTS, check_count, check_magnitude,
                                check_seed, overflow_guard)


@pytest.mark.parametrize("seed", [-1, -5, 1.5, True, "3", 2**63])
def test_bad_seeds_are_refused_with_the_option_named(seed):
    with pytest.raises(InputError, match="--seed"):
        check_seed(seed)


@pytest.mark.parametrize("seed", [None, 0, 12345, np.int64(7), 2**63 - 1])
def test_good_seeds_pass(seed):
    assert check_seed(seed) == (None if seed is None else int(seed))


def test_count_names_both_ends_of_the_range():
    with pytest.raises(InputError) as info:
        check_count(10**12, "--points", 2, MAX_POINTS, "curve points")
    assert "--points" in str(info.value) and "10,001" in str(info.value)
    assert check_count(MAX_POINTS, "--points", 2, MAX_POINTS, "curve points") == MAX_POINTS
    for bad in (1, MAX_POINTS + 1, 5.0, True):
        with pytest.raises(InputError):
            check_count(bad, "--points", 2, MAX_POINTS, "curve points")


def test_magnitude_limit_keeps_squares_inside_double_precision():
    assert math.isfinite(MAX_MAGNITUDE**2)
    assert check_magnitude(-MAX_MAGNITUDE, "x") == -MAX_MAGNITUDE
    with pytest.raises(InputError, match="double precision"):
        check_magnitude(1e200, "x")
    assert check_magnitude(1e-300, "x") == 1e-300          # small ends are harmless ...
    with pytest.raises(InputError, match="double precision"):
        check_magnitude(1e-300, "x", tiny=True)            # ... unless divided by or cubed
    assert check_magnitude(0.0, "x", tiny=True) == 0.0


def test_overflow_guard_turns_overflow_into_a_message_without_warnings():
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a numpy RuntimeWarning would fail here
        with pytest.raises(InputError, match="overflows double precision"):
            with overflow_guard("the range"):
                np.array([1e300]) * np.array([1e300])
        with pytest.raises(InputError, match="the range"):
            with overflow_guard("the range"):
                math.exp(1e6)
