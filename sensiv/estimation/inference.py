"""Inference helpers shared by the bound-producing layers: the Imbens–Manski interval and a
quiet progress indicator for long resampling runs."""

from __future__ import annotations

import math
import sys
import time
from dataclasses import dataclass

from sensiv.core.results import Interval

# Seconds a loop must have run before a progress line is shown.
PROGRESS_AFTER = 2.0


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


@dataclass
class Progress:
    """Progress on stderr for long loops: silent unless the loop has run for a while and stderr
    is a terminal, so JSON output and logs stay clean."""

    total: int
    label: str = "resampling"
    enabled: bool = True

    def __post_init__(self) -> None:
        self._start = time.monotonic()
        self._shown = False
        self._tty = self.enabled and hasattr(sys.stderr, "isatty") and sys.stderr.isatty()

    def update(self, done: int) -> None:
        if not self._tty:
            return
        elapsed = time.monotonic() - self._start
        if elapsed < PROGRESS_AFTER:
            return
        eta = elapsed / max(done, 1) * (self.total - done)
        sys.stderr.write(f"\r{self.label}: {done}/{self.total} ({eta:.0f} s left)   ")
        sys.stderr.flush()
        self._shown = True

    def close(self) -> None:
        if self._shown:
            sys.stderr.write("\r" + " " * 60 + "\r")
            sys.stderr.flush()
