"""Inference helpers shared by the bound-producing layers: the Imbens–Manski interval (the
progress bar of long resampling runs is :class:`sensiv.core.progress.Progress`)."""

from __future__ import annotations

import math

from sensiv.core.results import Interval


def imbens_manski(lower: float, upper: float, se_lower: float, se_upper: float,
                  confidence_level: float = 0.95) -> Interval:
    r"""Imbens & Manski (2004) confidence interval for a partially identified parameter.

    .. math::

        [\hat\theta_l - C\,\hat\sigma_l,\; \hat\theta_u + C\,\hat\sigma_u], \qquad
        \Phi\!\left(C + \frac{\hat\Delta}{\max(\hat\sigma_l, \hat\sigma_u)}\right) - \Phi(-C)
        = \text{level},

    with ``Δ = θ_u − θ_l``.  ``C`` runs from the one-sided ``z_{level}`` (long interval) to the
    two-sided ``z_{(1+level)/2}`` (point identification).  Infinite ends stay infinite.

    Examples
    --------
    >>> ci = imbens_manski(0.0, 0.0, 1.0, 1.0)
    >>> round(ci.low, 3), round(ci.high, 3)
    (-1.96, 1.96)
    """
    from scipy.optimize import brentq
    from scipy.special import ndtr, ndtri

    if not (math.isfinite(lower) and math.isfinite(upper)):
        low = lower - ndtri(confidence_level) * se_lower if math.isfinite(lower) else lower
        high = upper + ndtri(confidence_level) * se_upper if math.isfinite(upper) else upper
        return Interval(float(low), float(high))
    width = max(upper - lower, 0.0)
    scale = max(se_lower, se_upper)
    if scale == 0.0:
        return Interval(lower, upper)
    shift = width / scale

    def gap(c: float) -> float:
        return float(ndtr(c + shift) - ndtr(-c) - confidence_level)

    c = brentq(gap, 0.0, float(ndtri(0.5 + 0.5 * confidence_level)) + 1.0)
    return Interval(lower - c * se_lower, upper + c * se_upper)
