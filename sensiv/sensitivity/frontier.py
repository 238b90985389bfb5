r"""The breakdown frontier: where the conclusion ``β ≷ θ`` breaks, for a range of thresholds.

For each threshold ``θ`` the breakdown scale of the direct-effect set and, per instrument alone,
the breakdown direct effects — the exact roots of :mod:`sensiv.sensitivity.union`, repeated
over a grid of thresholds symmetric about the estimate.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from sensiv.core.results import Interval, json_number
from sensiv.sensitivity.direct_sets import DirectSet
from sensiv.sensitivity.linear_core import Core
from sensiv.sensitivity.union import breakdown_scale, direct_breakdown
from sensiv.sensitivity.union_sets import breakdown_scale_set, candidate_vertices

# The breakdown frontier runs over thresholds symmetric about the estimate that reach the union
# interval at scale 1 and the threshold, with this share of the reach to spare, on this many
# evenly spaced thresholds (plus the threshold itself and the ends of the interval at zero
# direct effect, where the frontier has its corners).
FRONTIER_POINTS = 61
FRONTIER_MARGIN = 0.25

# Ties: a threshold within this share of the size of the interval at zero direct effect
# (the largest of its width and the magnitudes of its ends) from one of its ends counts as that
# end.  There the interval at zero direct effect touches the threshold, so the conclusion is
# already at its breaking point: the row has no conclusion (side 0), breakdown scale 0 and
# breakdown direct effects exactly 0 on both sides for every instrument — whatever the row
# order or the units of the outcome, which move the computed roots only in their last bits.
TIE_TOLERANCE = 1e-9


def is_tie(threshold: float, base: Interval, tolerance: float = TIE_TOLERANCE) -> bool:
    """Whether ``threshold`` equals an end of ``base`` within ``tolerance`` (see above).

    Examples
    --------
    >>> base = Interval(0.8, 1.2)
    >>> is_tie(0.8 + 1e-14, base), is_tie(0.8 + 1e-6, base), is_tie(1.2, base)
    (True, False, True)
    """
    size = max((abs(v) for v in (base.low, base.high, base.width) if math.isfinite(v)),
               default=0.0)
    gap = min(abs(threshold - base.low), abs(threshold - base.high))
    return gap <= tolerance * size


@dataclass(frozen=True, slots=True)
class Frontier:
    """Breakdown of ``β > θ`` (or ``β < θ``) for a range of thresholds ``θ``.

    Row ``i`` describes ``threshold[i]``:

    * ``side``: ``+1`` when the interval at zero direct effect lies above the threshold (the
      conclusion is ``β > θ``), ``−1`` when below (``β < θ``), ``0`` when it contains it (no
      conclusion to break);
    * ``scale``: the breakdown scale ``t*(θ)`` of the set
      (:func:`~sensiv.sensitivity.union.breakdown_scale`): ``0`` when ``side`` is 0, ``inf``
      when the union stays clear of ``θ`` up to :data:`~sensiv.sensitivity.union.SCALE_MAX`;
    * ``direct_lower``/``direct_upper`` (shape ``(m, k_z)``): for each instrument alone, the
      direct effects nearest zero below and above at which the interval reaches ``θ``
      (:func:`~sensiv.sensitivity.union.direct_breakdown`); ``∓inf`` when there is none on
      that side.
    """

    threshold: np.ndarray
    scale: np.ndarray
    side: np.ndarray
    direct_lower: np.ndarray
    direct_upper: np.ndarray

    def to_list(self) -> list[dict]:
        return [{"threshold": float(th), "scale": json_number(t),
                 "conclusion": {1: ">", -1: "<", 0: "none"}[int(s)],
                 "direct_lower": [json_number(v) for v in lo],
                 "direct_upper": [json_number(v) for v in hi]}
                for th, t, s, lo, hi in zip(self.threshold, self.scale, self.side,
                                            self.direct_lower, self.direct_upper)]


def frontier_thresholds(union: Interval, threshold: float, base: Interval,
                        points: int = FRONTIER_POINTS) -> np.ndarray:
    """Thresholds for the frontier: symmetric about the estimate (the centre of ``base``, the
    interval at zero direct effect), reaching the union interval at scale 1 and the threshold
    with :data:`FRONTIER_MARGIN` of that reach to spare; plus ``threshold`` and the ends of
    ``base`` (the frontier's corners).  Values closer than :data:`TIE_TOLERANCE` times the
    reach count as one: the threshold and the ends are kept, a grid point beside them dropped.

    Examples
    --------
    >>> frontier_thresholds(Interval(0.0, 2.0), 0.5, Interval(0.8, 1.2), points=3).tolist()
    [-0.25, 0.5, 0.8, 1.0, 1.2, 2.25]
    """
    centre = 0.5 * (base.low + base.high)
    ends = [threshold, base.low, base.high]
    reach = max(abs(e - centre) for e in [*ends, union.low, union.high] if math.isfinite(e))
    if not reach > 0.0:
        reach = max(abs(centre), 1.0)
    reach *= 1.0 + FRONTIER_MARGIN
    grid = np.linspace(centre - reach, centre + reach, points)
    # values within TIE_TOLERANCE of the reach are one threshold: the exact threshold and ends
    # of ``base`` are kept over a grid point next to them (so that rounding of the grid, which
    # moves with the row order, never adds or drops a row)
    tol = TIE_TOLERANCE * reach
    ends = [threshold] + [e for e in ends[1:] if abs(e - threshold) > tol]
    grid = [g for g in grid if all(abs(g - e) > tol for e in ends)]
    return np.unique(np.concatenate([grid, ends]))


def breakdown_frontier(core: Core, vertices: np.ndarray | DirectSet, thresholds: np.ndarray,
                       *, uninformative: bool = False) -> Frontier:
    """The breakdown scale and the per-instrument breakdown direct effects for every threshold
    (exact roots, as for the single threshold of the sweep).  A threshold at an end of the
    interval at zero direct effect (within :data:`TIE_TOLERANCE`) is a tie: side 0, scale 0
    and breakdown direct effects 0.

    ``vertices`` are the points of Γ among which the union's ends lie, or the set itself (then
    its candidate corners, :func:`~sensiv.sensitivity.union_sets.candidate_vertices`, or — for
    a box with too many free coordinates — the bisection of
    :func:`~sensiv.sensitivity.union_sets.breakdown_scale_set`).

    With an ``uninformative`` first stage the union interval is unbounded at every scale, so
    the breakdown scale is 0 throughout (as in :func:`sensiv.sensitivity.bounds.analyse`).

    Examples
    --------
    >>> core = Core("x", ("z",), 1.0, np.array([1.0]), np.diag([0.01, 0.0]), 1.96)
    >>> f = breakdown_frontier(core, np.array([[-0.5], [0.5]]), np.array([0.0, 1.0, 2.0]))
    >>> f.side.tolist(), f.scale.round(4).tolist()
    ([1, 0, -1], [1.608, 0.0, 1.608])
    """
    thresholds = np.asarray(thresholds, float)
    dset = None
    if isinstance(vertices, DirectSet):
        dset, vertices = vertices, candidate_vertices(core, vertices)
    k = len(core.instruments)
    base = core.interval(np.zeros(k))
    scale = np.empty(thresholds.size)
    side = np.zeros(thresholds.size, dtype=int)
    lower = np.empty((thresholds.size, k))
    upper = np.empty((thresholds.size, k))
    for i, theta in enumerate(thresholds):
        theta = float(theta)
        if is_tie(theta, base):
            scale[i], lower[i], upper[i] = 0.0, 0.0, 0.0
            continue
        if not base.contains(theta):
            side[i] = 1 if base.low > theta else -1
        if uninformative:
            t_star = 0.0
        elif vertices is None:
            t_star = breakdown_scale_set(core, dset, theta)
        else:
            t_star = breakdown_scale(core, vertices, theta)
        scale[i] = math.inf if t_star is None else t_star
        lo, hi = direct_breakdown(core, theta)
        lower[i] = [-math.inf if v is None else v for v in lo]
        upper[i] = [math.inf if v is None else v for v in hi]
    return Frontier(thresholds, scale, side, lower, upper)
