r"""Union of intervals, identified set, breakdown scale and largest standard error over a
direct-effect set Γ — without enumerating the ``2^k`` corners of a box.

* **Identified set** ``{β̂ − a'γ : γ ∈ tΓ}``: linear in ``γ``, so for a box it is closed form,
  ``β̂ − t(a'm ± |a|'h)`` (centre ``m``, half-widths ``h``); for a polytope its extreme values
  sit at vertices (a linear programme, :func:`sensiv.sensitivity.union.identified_set_lp`, at
  scale 1).
* **Union ends** ``β̂ ∓ max_{γ∈tΓ} (±a'γ + c√q(γ))``: the maximum of a convex function,
  found by :func:`sensiv.sensitivity.convex_max.maximise` for a box (monotone coordinates
  fixed, corners of the rest enumerated while there are at most
  :data:`~sensiv.sensitivity.convex_max.CORNER_LIMIT`, branch and bound with a certified gap
  beyond) and from the vertices for a polytope (enumerated by active sets, for at most
  :data:`~sensiv.sensitivity.direct_sets.MAX_VERTEX_RANK` instruments; larger polytopes are
  refused with exit code 2).  A branch-and-bound end is the certified bound: never narrower
  than the exact union.
* **Breakdown scale**: exact roots over the candidate corners when they are few; otherwise the
  first ``t`` at which the (outer) union reaches the threshold, by bisection — the function
  ``t ↦ max_{γ∈Γ}(t a'γ + c√q(tγ))`` is a maximum of convex functions of ``t``, hence convex,
  so the union's near end crosses the threshold at most once after ``t = 0``.
"""

from __future__ import annotations

import contextlib
import contextvars
import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from sensiv.core.results import Interval
from sensiv.sensitivity.convex_max import (CORNER_LIMIT, GAP, MAX_NODES, Maximum, Objective,
                                           corners, fixed_coordinates, maximise)
from sensiv.sensitivity.direct_sets import DirectSet
from sensiv.sensitivity.linear_core import Core
from sensiv.sensitivity.union import SCALE_MAX, breakdown_scale, union_curve

BISECTION_TOL = 1e-12       # relative tolerance of a bisected breakdown scale
# Branch and bound explores MAX_NODES sub-boxes for the stated set (scale 1) and this many for
# every other curve point and bisection step (their ends are then outer bounds, flagged in
# ``curve_exact``), so a hard design costs seconds per point, not minutes.
SIDE_NODES = 100
SE_CACHE = 512      # largest standard errors remembered (one float and its key each)
CORNERS = "corners"
BRANCH_AND_BOUND = "branch_and_bound"


@dataclass(frozen=True, slots=True)
class UnionMethod:
    """How the union interval's ends were found (at scale 1, the stated set).

    ``lower``/``upper``: ``"corners"`` (vertices enumerated, exact) or ``"branch_and_bound"``;
    ``lower_gap``/``upper_gap`` the achieved relative gaps, ``gap`` the stated tolerance;
    ``exact`` when both ends are exact (gap closed); ``curve_exact`` the same over the curve.
    """

    lower: str
    upper: str
    gap: float
    lower_gap: float
    upper_gap: float
    lower_exact: bool
    upper_exact: bool
    curve_exact: bool

    @property
    def exact(self) -> bool:
        return self.lower_exact and self.upper_exact

    def to_dict(self) -> dict:
        return {"lower": self.lower, "upper": self.upper, "gap": self.gap,
                "lower_gap": self.lower_gap, "upper_gap": self.upper_gap,
                "lower_exact": self.lower_exact, "upper_exact": self.upper_exact,
                "exact": self.exact, "curve_exact": self.curve_exact,
                "corner_limit": CORNER_LIMIT}


def box_limits(dset: DirectSet) -> tuple[np.ndarray, np.ndarray]:
    """``(lows, highs)`` of a box Γ."""
    return (np.array([b.low for b in dset.box], float),
            np.array([b.high for b in dset.box], float))


def candidate_vertices(core: Core, dset: DirectSet,
                       corner_limit: int = CORNER_LIMIT) -> np.ndarray | None:
    """Points among which both union ends lie for every scale ``t ≥ 0``: the vertices of a
    polytope; for a box the corners that vary only the non-monotone coordinates (monotone ones
    held at the end their sign picks, a choice that does not depend on ``t``) — ``None`` when
    more than ``corner_limit`` coordinates remain free."""
    if dset.box is None:
        return dset.vertices
    lows, highs = box_limits(dset)
    rows = []
    for sign in (1.0, -1.0):
        obj = Objective.of(sign * core.slope, core.critical, core.quad)
        base, free = fixed_coordinates(obj, lows, highs)
        if int(free.sum()) > corner_limit:
            return None
        rows.append(corners(base, free, lows, highs))
    return np.unique(np.vstack(rows), axis=0)


def union_at(core: Core, dset: DirectSet, scale: float, *, gap: float = GAP,
             corner_limit: int = CORNER_LIMIT, max_nodes: int = MAX_NODES
             ) -> tuple[Interval, Maximum, Maximum]:
    """Union interval over ``scale·Γ`` (a box) with the two maxima behind its ends."""
    lows, highs = box_limits(dset)
    lows, highs = scale * lows, scale * highs
    ends = [maximise(Objective.of(sign * core.slope, core.critical, core.quad), lows, highs,
                     gap=gap, corner_limit=corner_limit, max_nodes=max_nodes)
            for sign in (1.0, -1.0)]
    return Interval(core.estimate - ends[0].value, core.estimate + ends[1].value), *ends


def union_curve_set(core: Core, dset: DirectSet, scales: np.ndarray, *, gap: float = GAP,
                    corner_limit: int = CORNER_LIMIT
                    ) -> tuple[np.ndarray, np.ndarray, UnionMethod]:
    """Union interval ends for every scale, and how they were found (see the module text)."""
    scales = np.asarray(scales, float)
    points = None if corner_limit < 0 else candidate_vertices(core, dset, corner_limit)
    if points is not None:
        lo, hi = union_curve(core, points, scales)
        return lo, hi, UnionMethod(CORNERS, CORNERS, gap, 0.0, 0.0, True, True, True)
    lo, hi = np.empty(scales.size), np.empty(scales.size)
    all_exact = True
    low_end = high_end = None
    for i, t in enumerate(scales):
        interval, low_end, high_end = union_at(
            core, dset, float(t), gap=gap, corner_limit=corner_limit,
            max_nodes=MAX_NODES if t == 1.0 else SIDE_NODES)
        lo[i], hi[i] = interval.low, interval.high
        all_exact = all_exact and low_end.exact and high_end.exact
    if scales.size == 0 or scales[-1] != 1.0:
        _, low_end, high_end = union_at(core, dset, 1.0, gap=gap, corner_limit=corner_limit)
    return lo, hi, UnionMethod(low_end.method, high_end.method, gap, low_end.gap,
                               high_end.gap, low_end.exact, high_end.exact, all_exact)


def identified_curve_set(core: Core, dset: DirectSet, scales: np.ndarray
                         ) -> tuple[np.ndarray, np.ndarray]:
    """Identified set ``{β̂ − a'γ : γ ∈ tΓ}`` for every ``t``: closed form for a box."""
    scales = np.asarray(scales, float)
    if dset.box is None:
        av = dset.vertices @ core.slope
        return core.estimate - scales * av.max(), core.estimate - scales * av.min()
    lows, highs = box_limits(dset)
    centre = float(core.slope @ (0.5 * (lows + highs)))
    reach = float(np.abs(core.slope) @ (0.5 * (highs - lows)))
    return (core.estimate - scales * (centre + reach),
            core.estimate - scales * (centre - reach))


def breakdown_scale_set(core: Core, dset: DirectSet, threshold: float, *, gap: float = GAP,
                        corner_limit: int = CORNER_LIMIT) -> float | None:
    """Smallest ``t ≥ 0`` at which the union over ``tΓ`` reaches ``threshold`` (``None``:
    never up to :data:`~sensiv.sensitivity.union.SCALE_MAX`).  Exact roots over the candidate
    corners when they are few, else bisection on the certified (outer) union, so the scale
    is never later than the exact one (up to :data:`BISECTION_TOL`)."""
    points = None if corner_limit < 0 else candidate_vertices(core, dset, corner_limit)
    if points is not None:
        return breakdown_scale(core, points, threshold)
    base = core.interval(np.zeros(len(core.instruments)))
    if base.contains(threshold):
        return 0.0

    def reached(t: float) -> bool:
        interval = union_at(core, dset, t, gap=gap, corner_limit=corner_limit,
                            max_nodes=SIDE_NODES)[0]
        return interval.contains(threshold)

    low, high = 0.0, 1.0
    while not reached(high):
        low, high = high, 2.0 * high
        if low >= SCALE_MAX:
            return None
    while high - low > BISECTION_TOL * high:
        middle = 0.5 * (low + high)
        if reached(middle):
            high = middle
        else:
            low = middle
    return high if high <= SCALE_MAX else None


def largest_se_set(cores: Sequence[Core], dset: DirectSet, scale: float = 1.0, *,
                   gap: float = GAP, corner_limit: int = CORNER_LIMIT,
                   max_nodes: int = SIDE_NODES) -> float:
    """``max`` over the cores and ``γ ∈ scale·Γ`` of ``√q(γ)`` (convex, so at a vertex): the
    vertices of a polytope; for a box the certified maximum of
    :func:`~sensiv.sensitivity.convex_max.maximise` (an upper bound when the gap stays open)."""
    if dset.box is None:
        points = scale * dset.vertices
        return max(math.sqrt(float(np.max(core.variance(points)))) for core in cores)
    lows, highs = box_limits(dset)
    zero = np.zeros(len(lows))
    memo = _SE_MEMO.get()
    found = []
    for core in cores:
        key = (core.quad.tobytes(), (scale * lows).tobytes(), (scale * highs).tobytes(), gap,
               corner_limit, max_nodes)
        value = memo.get(key) if memo is not None else None
        if value is None:
            value = maximise(Objective.of(zero, 1.0, core.quad), scale * lows, scale * highs,
                             gap=gap, corner_limit=corner_limit, max_nodes=max_nodes).value
            if memo is not None:
                memo[key] = value
        found.append(value)
    return max(found)


_SE_MEMO: contextvars.ContextVar[dict | None] = contextvars.ContextVar("largest_se_memo",
                                                                       default=None)


@contextlib.contextmanager
def remembering_se():
    """Within it (also as a decorator), :func:`largest_se_set` remembers each box maximum by
    the exact bytes of its inputs: one sweep asks for the same scaled box several times (the
    bias-aware curve, the scan of its breakdown scale over the same grid, the interval at
    scale 1), and a deterministic maximisation of the same numbers gives the same number.
    The memory is dropped on leaving the outermost block (timings of repeated sweeps stay
    honest)."""
    token = _SE_MEMO.set({}) if _SE_MEMO.get() is None else None
    try:
        yield
    finally:
        if token is not None:
            _SE_MEMO.reset(token)
