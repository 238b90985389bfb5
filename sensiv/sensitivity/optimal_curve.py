r"""The optimally weighted bias-aware interval along the scalings ``tΓ`` and its breakdown
scale (Armstrong & Kolesár 2021; overidentified models only).

At scale ``t`` the interval is the optimum for the set ``tΓ`` itself: the scaled set has
centre ``tγ_c``, worst-case bias ``t·B(w)`` and the moments' covariance at ``tγ_c``, so
:func:`~sensiv.sensitivity.optimal_weights.optimal_bias_aware` is called with ``scale=t``
(one traced trade-off per scale, no homogeneity shortcut: when ``γ_c ≠ 0`` the covariance at
the centre changes with ``t``, so the traced weights do too).  Each entry therefore equals a
direct call on the scaled set.

Breakdown.  ``g(t) = side·(end(t) − θ)`` with ``end`` the near end of the optimal interval.
Each candidate's end is continuous in ``t`` and, for a set centred at zero, monotone
(see :func:`~sensiv.sensitivity.bias_aware.bias_aware_scale`); the optimum picks the shortest
candidate, so ``g`` can jump where the pick changes and is not proven monotone.  We scan ``g``
on the curve's scales (extended geometrically to ``SCALE_MAX``) for the first sign change and
refine it by Brent's method; at a jump Brent returns the switching scale (where the interval
jumps over the threshold), otherwise a scale at which the end equals the threshold.
"""

from __future__ import annotations

import math

import numpy as np

from sensiv.sensitivity.bias_aware import bias_aware, first_crossing, set_centre
from sensiv.sensitivity.direct_sets import DirectSet
from sensiv.sensitivity.linear_core import Core
from sensiv.sensitivity.optimal_weights import WeightPieces, optimal_bias_aware

FAR_POINTS = 41


def optimal_at(m: WeightPieces, core: Core, dset: DirectSet, j: int, level: float,
               scale: float):
    """The optimally weighted interval over ``scale·Γ`` (an ``OptimalBiasAware``)."""
    reference = bias_aware([core], dset, level, scale=scale, centre=set_centre(dset))
    return optimal_bias_aware(m, core, dset, j, level, reference, scale=scale)


def optimal_curve(m: WeightPieces, core: Core, dset: DirectSet, j: int, level: float,
                  scales: np.ndarray, *, unbounded: bool = False
                  ) -> tuple[np.ndarray, np.ndarray]:
    """Ends ``ba_opt_lower``, ``ba_opt_upper`` of the optimal interval at every scale."""
    if unbounded:
        n = len(scales)
        return np.full(n, -np.inf), np.full(n, np.inf)
    lo, hi = [], []
    for t in np.asarray(scales, float):
        ci = optimal_at(m, core, dset, j, level, float(t)).interval.ci
        lo.append(ci.low)
        hi.append(ci.high)
    return np.array(lo), np.array(hi)


def optimal_scale(m: WeightPieces, core: Core, dset: DirectSet, j: int, threshold: float,
                  level: float, grid: np.ndarray) -> float | None:
    """First ``t ≥ 0`` at which the optimal interval over ``tΓ`` reaches ``threshold``
    (``None``: not up to ``SCALE_MAX``); method in the module docstring."""

    at_zero = optimal_at(m, core, dset, j, level, 0.0).interval.ci
    if at_zero.contains(threshold):
        return 0.0
    side = 1.0 if at_zero.low > threshold else -1.0

    def gap(t: float) -> float:
        ci = optimal_at(m, core, dset, j, level, t).interval.ci
        end = ci.low if side > 0 else ci.high
        return side * (end - threshold) if math.isfinite(end) else -1.0

    return first_crossing(gap, grid, FAR_POINTS)
