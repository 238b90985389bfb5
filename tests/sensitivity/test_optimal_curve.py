"""The optimally weighted bias-aware interval along the scalings tΓ and its breakdown scale.

Sources beside each check:
* common practice, no source: the curve entry at scale t is the optimum for the set tΓ, so it
  equals a direct call of ``optimal_bias_aware`` on the scaled box (to 1e-8); at the breakdown
  scale the near end equals the threshold (to 1e-8); the optimum is never longer than the
  2SLS-centred interval at any scale (the 2SLS weights are a candidate of the search).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from sensiv.sensitivity import bias_aware as ba
from sensiv.sensitivity import optimal_curve as oc
from sensiv.sensitivity import optimal_weights as ow
from sensiv.sensitivity.direct_sets import box_set

from test_optimal_weights import design, pieces_of

RANGES = [(-0.04, 0.06), (-0.02, 0.02), (0.0, 0.04)]   # centre off zero


def _setup(seed=4, se="robust"):
    frame = design(n=500, seed=seed, k_z=3)
    result, pieces, sums, core = pieces_of(frame, 3, se, cluster="g")
    m = ow.moment_pieces(pieces, sums, result)
    return m, core, box_set(core.instruments, RANGES)


def test_curve_equals_a_direct_call_on_the_scaled_set():
    # common practice, no source: the entry at t is the optimum over the box tΓ itself
    m, core, dset = _setup()
    scales = np.array([0.0, 0.5, 1.0, 1.7])
    lo, hi = oc.optimal_curve(m, core, dset, 0, 0.95, scales)
    for t, low, high in zip(scales, lo, hi):
        scaled = box_set(core.instruments, [(t * a, t * b) for a, b in RANGES])
        reference = ba.bias_aware([core], scaled, 0.95)
        direct = ow.optimal_bias_aware(m, core, scaled, 0, 0.95, reference).interval.ci
        assert low == pytest.approx(direct.low, abs=1e-8)
        assert high == pytest.approx(direct.high, abs=1e-8)


def test_breakdown_end_equals_threshold():
    # common practice, no source: at the root the near end of the optimal interval is θ
    m, core, dset = _setup()
    at_zero = oc.optimal_at(m, core, dset, 0, 0.95, 0.0).interval.ci
    threshold = at_zero.low - 0.5 * at_zero.width     # below the interval at zero
    t = oc.optimal_scale(m, core, dset, 0, threshold, 0.95, np.linspace(0, 1, 21))
    assert t is not None and t > 0.0
    end = oc.optimal_at(m, core, dset, 0, 0.95, t).interval.ci.low
    assert end == pytest.approx(threshold, abs=1e-8)
    # before the root the interval stays clear of the threshold
    assert oc.optimal_at(m, core, dset, 0, 0.95, 0.9 * t).interval.ci.low > threshold
    # inside the interval at zero: breakdown at 0
    assert oc.optimal_scale(m, core, dset, 0, at_zero.low + 1e-6, 0.95,
                            np.linspace(0, 1, 5)) == 0.0


@settings(max_examples=8, deadline=None)
@given(seed=st.integers(0, 10_000), t=st.floats(0.0, 3.0))
def test_never_longer_than_2sls_centred_at_any_scale(seed, t):
    # common practice, no source: the 2SLS weights are one candidate at every scale
    m, core, dset = _setup(seed=seed)
    opt = oc.optimal_at(m, core, dset, 0, 0.95, t)
    two = ba.bias_aware([core], dset, 0.95, scale=t)
    assert opt.interval.ci.width <= two.ci.width * (1 + 1e-12)


def test_unbounded_curve_is_the_whole_line():
    m, core, dset = _setup()
    lo, hi = oc.optimal_curve(m, core, dset, 0, 0.95, np.array([0.0, 1.0]), unbounded=True)
    assert np.all(np.isneginf(lo)) and np.all(np.isposinf(hi))
