"""Documented limits of the size options and the shared checks of seeds, sizes and magnitudes.

Every size option has a maximum so that a mistyped value (``--points 1e12``) is refused with a
message instead of ending in a memory error; the same numbers appear in ``--help``.  Numbers
whose magnitude exceeds :data:`MAX_MAGNITUDE` are refused because squares and products of them
(variances, quadratics in the direct effect) would overflow double precision.
"""

from __future__ import annotations

import math
import numbers

from sensiv.core.errors import InputError

MAX_POINTS = 10_001
"""Most curve points of ``sweep``, ``published`` and ``corrbound`` (``--points``)."""

MAX_DRAWS = 10_000_000
"""Most Monte Carlo draws of ``prior`` (``--draws``)."""

MAX_REPS = 100_000
"""Most bootstrap replicates of ``corrbound`` (``--reps``)."""

MAX_SEED = 2**63 - 1
"""Largest seed accepted (seeds are non-negative integers)."""

MAX_MAGNITUDE = 1e150
"""Largest magnitude of a range end or printed number: its square must stay far inside the
range of double precision (about 1.8e308)."""

__all__ = ["MAX_DRAWS", "MAX_MAGNITUDE", "MAX_POINTS", "MAX_REPS", "MAX_SEED", "check_count",
           "check_magnitude", "check_seed"]


def _whole(value) -> bool:
    return isinstance(value, numbers.Integral) and not isinstance(value, bool)


def check_seed(seed, option: str = "--seed") -> int | None:
    """``seed`` as an int (None stays None); refuse negative, fractional or too large seeds."""
    if seed is None:
        return None
    if not _whole(seed) or not 0 <= seed <= MAX_SEED:
        raise InputError(f"{option} {seed!r} is not a seed; give a whole number from 0 to "
                         f"{MAX_SEED}, e.g. 12345")
    return int(seed)


def check_count(value, option: str, low: int, high: int, what: str) -> int:
    """A whole number ``value`` in ``[low, high]``; the message names the option and both ends."""
    if not _whole(value) or not low <= value <= high:
        raise InputError(f"{option} {value!r} is outside the accepted range of {what}: give a "
                         f"whole number from {low} to {high:,}")
    return int(value)


def check_magnitude(value: float, option: str) -> float:
    """Refuse a number beyond :data:`MAX_MAGNITUDE` (or below its reciprocal, if non-zero)."""
    v = float(value)
    if math.isfinite(v) and (abs(v) > MAX_MAGNITUDE or 0.0 < abs(v) < 1.0 / MAX_MAGNITUDE):
        raise InputError(f"{option} {v:g} is beyond what double precision supports in this "
                         f"analysis (magnitudes from {1.0 / MAX_MAGNITUDE:g} to "
                         f"{MAX_MAGNITUDE:g}); rescale the variables (e.g. measure the "
                         "outcome in thousands) and the numbers with them")
    return v
