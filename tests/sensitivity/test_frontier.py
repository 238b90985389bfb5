"""The breakdown frontier's ties: thresholds at an end of the interval at zero direct effect.

Invariants (common practice, no source): the frontier does not depend on the order of the rows,
and rescaling the outcome (with the direct-effect ranges and the threshold) rescales the
thresholds and breakdown direct effects and leaves the breakdown scales alone.  At a tie the
interval at zero direct effect touches the threshold: side 0, scale 0 and breakdown direct
effects exactly 0 (the documented rule of ``sensiv.sensitivity.frontier.TIE_TOLERANCE``).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from sensiv.core.results import Interval, format_number, json_number
from sensiv.data import Spec
from sensiv.sensitivity import bounds
from sensiv.sensitivity.frontier import TIE_TOLERANCE, frontier_thresholds, is_tie

SPEC = Spec("y", ["x"], ["z1", "z2"], controls=["w"])


def _frame(seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    n = 400
    z1, z2, w = rng.normal(size=(3, n))
    x = 0.8 * z1 + 0.5 * z2 + 0.3 * w + rng.normal(size=n)
    return pd.DataFrame({"y": 1 + 0.4 * x + 0.2 * w + rng.normal(size=n), "x": x, "z1": z1,
                         "z2": z2, "w": w})


def _frontier(frame: pd.DataFrame, k: float = 1.0) -> list[dict]:
    direct = f"-{0.05 * k!r}:{0.05 * k!r}"
    result = bounds.sweep(frame, SPEC, direct=[direct, direct], threshold=0.0, points=5)
    return result.frontier.to_list()


def _same(a, b, tol: float) -> bool:
    if a is None or b is None:
        return a is b
    return abs(a - b) <= tol * max(1.0, abs(a), abs(b))


@pytest.mark.parametrize("seed", [5, 17, 29])
def test_permuted_rows_and_rescaled_outcome_give_the_same_frontier(seed):
    frame = _frame(seed)
    k = 1000.0
    versions = {"rows": _frontier(frame),
                "permuted": _frontier(frame.sample(frac=1.0, random_state=seed)
                                      .reset_index(drop=True)),
                "rescaled": _frontier(frame.assign(y=frame["y"] * k), k)}
    reference = versions["rows"]
    for name, rows in versions.items():
        unit = k if name == "rescaled" else 1.0
        assert len(rows) == len(reference), name
        for ref, row in zip(reference, rows):
            assert _same(row["threshold"] / unit, ref["threshold"], 1e-9), (name, row, ref)
            assert row["conclusion"] == ref["conclusion"], (name, row, ref)
            assert _same(row["scale"], ref["scale"], 1e-7), (name, row, ref)
            for side in ("direct_lower", "direct_upper"):
                for v, r in zip(row[side], ref[side]):
                    assert _same(None if v is None else v / unit, r, 1e-7), (name, side, row, ref)
        # the ends of the interval at zero direct effect: ties, reported as exactly 0
        inside = [row for row in rows if row["conclusion"] == "none"]
        for tie in (inside[0], inside[-1]):
            assert tie["scale"] == 0.0
            assert tie["direct_lower"] == [0.0, 0.0] and tie["direct_upper"] == [0.0, 0.0]
            assert all(math.copysign(1.0, v) == 1.0 for v in tie["direct_lower"])


def test_a_tie_is_within_the_documented_tolerance():
    base = Interval(-2.0, 3.0)
    size = 5.0  # the width is the largest of width and end magnitudes
    assert is_tie(-2.0, base) and is_tie(3.0 + 0.5 * TIE_TOLERANCE * size, base)
    assert not is_tie(3.0 + 2.0 * TIE_TOLERANCE * size, base) and not is_tie(0.5, base)
    assert not is_tie(1.0, Interval(-math.inf, math.inf))


def test_a_grid_point_beside_the_threshold_is_not_a_second_row():
    # the centre 2e-12 of the base lands the middle grid point next to the threshold 0
    base = Interval(-1.0 + 2e-12, 1.0 + 2e-12)
    thresholds = frontier_thresholds(Interval(-3.0, 3.0), 0.0, base, points=5)
    assert np.count_nonzero(np.abs(thresholds) < 1e-9) == 1 and 0.0 in thresholds


def test_zero_prints_as_0_never_minus_0():
    assert format_number(-0.0) == "0" and format_number(0.0) == "0"
    assert str(Interval(-0.0, 0.0)) == "[0, 0]"
    assert math.copysign(1.0, json_number(-0.0)) == 1.0
    assert format_number(-1.5e-19) == "-1.5e-19"  # a true nonzero value keeps its sign
