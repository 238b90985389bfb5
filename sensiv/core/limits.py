"""Documented limits of the size options and the shared checks of seeds, sizes and magnitudes.

Every size option has a maximum so that a mistyped value (``--points 1e12``) is refused with a
message instead of ending in a memory error; the same numbers appear in ``--help``.  Numbers
whose magnitude exceeds :data:`MAX_MAGNITUDE` are refused because squares and products of them
(variances, quadratics in the direct effect) would overflow double precision.
"""

from __future__ import annotations

import contextlib
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

PUBLISHED_MAGNITUDE = 1e100
"""Largest magnitude of a printed number in ``published``: the stress test uses cubes of the
first stage, which must stay inside double precision."""

__all__ = ["MAX_DRAWS", "MAX_MAGNITUDE", "MAX_POINTS", "MAX_REPS", "MAX_SEED",
           "PUBLISHED_MAGNITUDE", "check_count", "check_magnitude", "check_seed",
           "overflow_guard"]


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


def check_magnitude(value: float, option: str, limit: float = MAX_MAGNITUDE,
                    tiny: bool = False) -> float:
    """Refuse a number beyond ``limit`` (with ``tiny``, also a non-zero one below its
    reciprocal: a quantity that is divided by, or cubed, must not underflow)."""
    v = float(value)
    small = tiny and 0.0 < abs(v) < 1.0 / limit
    if math.isfinite(v) and (abs(v) > limit or small):
        span = f"from {1.0 / limit:g} to {limit:g}" if tiny else f"up to {limit:g}"
        raise InputError(f"{option} {v:g} is beyond what double precision supports in this "
                         f"analysis (magnitudes {span}); rescale the variables (e.g. measure the "
                         "outcome in thousands) and the numbers with them")
    return v


@contextlib.contextmanager
def overflow_guard(what: str):
    """Turn an overflow of double precision inside the block (numpy or Python floats) into an
    :class:`InputError` that names ``what`` to narrow or rescale — never a stream of numpy
    warnings or a traceback."""
    import numpy as np

    try:
        with np.errstate(over="raise"):
            yield
    except (FloatingPointError, OverflowError, ZeroDivisionError) as exc:
        raise InputError(f"the computation overflows double precision ({exc}); {what} is too "
                         "wide or too extreme for the data: narrow it, or rescale the outcome "
                         "(e.g. measure it in thousands) and the range with it") from exc
