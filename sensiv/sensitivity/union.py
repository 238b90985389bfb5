r"""Exact unions of Wald intervals over scalings ``tΓ`` of a direct-effect set, identified sets
and breakdown points, all from a :class:`~sensiv.sensitivity.linear_core.Core` and the vertices
of Γ (Conley, Hansen & Rossi 2012 for the union of intervals).

* The lower end ``β̂ − a'γ − c√q(γ)`` is concave and the upper end convex in ``γ``, so over a
  convex polytope both extremes sit at vertices: no grid, no optimiser.
* The breakdown scale of Γ solves ``(β̂ − θ₀ − t a'v)² = c² q(t v)`` for each vertex ``v``, a
  quadratic in ``t``: exact roots, no bisection.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from sensiv.core.results import Interval
from sensiv.partial_id.solver import solve
from sensiv.sensitivity.direct_sets import DirectSet
from sensiv.sensitivity.linear_core import Core

SCALE_MAX = 1000.0          # breakdown scales beyond this are reported as "never" (null)
ROOT_TOL = 1e-12            # relative tolerance for degenerate quadratic coefficients


def quadratic_roots(a2: float, a1: float, a0: float) -> np.ndarray:
    """Real roots of ``a2 t² + a1 t + a0`` (numerically stable; degenerate cases handled).

    Examples
    --------
    >>> quadratic_roots(1.0, -3.0, 2.0).tolist()
    [1.0, 2.0]
    """
    scale = max(abs(a2), abs(a1), abs(a0))
    if scale == 0.0 or not math.isfinite(scale):
        return np.array([])
    # the roots do not change when every coefficient is divided by a power of two near the
    # largest (exact in binary): no overflow in the discriminant
    unit = 2.0 ** math.frexp(scale)[1]
    a2, a1, a0 = a2 / unit, a1 / unit, a0 / unit
    scale /= unit
    if abs(a2) <= ROOT_TOL * scale:
        if abs(a1) <= ROOT_TOL * scale:
            return np.array([])
        return np.array([-a0 / a1])
    disc = a1 * a1 - 4.0 * a2 * a0
    if disc < 0:
        if disc > -ROOT_TOL * a1 * a1:
            return np.array([-a1 / (2.0 * a2)])
        return np.array([])
    q = -0.5 * (a1 + math.copysign(math.sqrt(disc), a1 if a1 != 0 else 1.0))
    roots = [q / a2]
    if q != 0.0:
        roots.append(a0 / q)
    return np.sort(np.array(roots))


def union_interval(core: Core, vertices: np.ndarray, scale: float = 1.0) -> Interval:
    """Union of the γ-specific Wald intervals over ``scale·Γ`` — exact, from the vertices."""
    lo, hi = union_curve(core, vertices, np.array([scale]))
    return Interval(float(lo[0]), float(hi[0]))


def union_curve(core: Core, vertices: np.ndarray, scales: np.ndarray) -> tuple[np.ndarray,
                                                                                 np.ndarray]:
    """Union interval ends for every scale (vectorised over scales × vertices)."""
    scales = np.asarray(scales, float)
    av = vertices @ core.slope                                      # (m,)
    qv = vertices @ core.quad[0, 1:]                                # (m,)
    wv = np.einsum("ij,jk,ik->i", vertices, core.quad[1:, 1:], vertices)
    t = scales[:, None]
    beta = core.estimate - t * av
    var = np.maximum(core.quad[0, 0] - 2.0 * t * qv + t * t * wv, 0.0)
    half = core.critical * np.sqrt(var)
    return (beta - half).min(axis=1), (beta + half).max(axis=1)


def identified_curve(core: Core, vertices: np.ndarray, scales: np.ndarray) -> tuple[
        np.ndarray, np.ndarray]:
    """Identified set ``{β̂ − a'γ : γ ∈ tΓ}`` for every scale ``t`` (linear, so vertices)."""
    av = vertices @ core.slope
    scales = np.asarray(scales, float)
    return core.estimate - scales * av.max(), core.estimate - scales * av.min()


def identified_set_lp(core: Core, dset: DirectSet) -> Interval:
    """Identified set over a polytope by two linear programmes (cvxpy).

    Programme: minimise / maximise ``β̂ − a'γ`` over ``γ`` subject to ``A γ ≤ b``.
    """
    import cvxpy as cp

    gamma = cp.Variable(len(dset.instruments))
    cons = [dset.constraints @ gamma <= dset.rhs]
    low = solve(cp.Problem(cp.Minimize(core.estimate - core.slope @ gamma), cons),
                what="identified-set programme")
    high = solve(cp.Problem(cp.Maximize(core.estimate - core.slope @ gamma), cons),
                 what="identified-set programme")
    return Interval(low.value, high.value)


def _touching_roots(core: Core, threshold: float, av: float, qv: float, wv: float) -> np.ndarray:
    """Roots in ``t`` of ``(β̂ − θ₀ − t·av)² = c²(Q₀₀ − 2t·qv + t²·wv)``."""
    d = core.estimate - threshold
    c2 = core.critical**2
    return quadratic_roots(av * av - c2 * wv, -2.0 * d * av + 2.0 * c2 * qv,
                           d * d - c2 * core.quad[0, 0])


def breakdown_scale(core: Core, vertices: np.ndarray, threshold: float) -> float | None:
    """Smallest ``t ≥ 0`` at which the union interval over ``tΓ`` reaches ``threshold``.

    ``0.0`` when the ordinary interval already contains the threshold; ``None`` when the
    interval stays clear of it for every ``t ≤`` :data:`SCALE_MAX`.
    """
    base = core.interval(np.zeros(len(core.instruments)))
    if base.contains(threshold):
        return 0.0
    side = 1.0 if base.low > threshold else -1.0
    best = math.inf
    d = core.estimate - threshold
    for v in vertices:
        av = float(v @ core.slope)
        qv = float(v @ core.quad[0, 1:])
        wv = float(v @ core.quad[1:, 1:] @ v)
        for t in _touching_roots(core, threshold, av, qv, wv):
            gap = side * (d - t * av)
            if 0.0 < t <= SCALE_MAX and gap >= -ROOT_TOL * (abs(d) + abs(t * av)):
                best = min(best, float(t))
    return None if math.isinf(best) else best


def direct_breakdown(core: Core, threshold: float) -> tuple[list[float | None],
                                                              list[float | None]]:
    """Per instrument alone: the direct effects nearest zero, below and above, at which the
    γ-specific interval reaches ``threshold`` (exact roots; ``None`` when there is none)."""
    lower, upper = [], []
    for k in range(len(core.instruments)):
        roots = _touching_roots(core, threshold, float(core.slope[k]),
                                float(core.quad[0, 1 + k]), float(core.quad[1 + k, 1 + k]))
        neg = [float(r) for r in roots if r < 0]
        pos = [float(r) for r in roots if r > 0]
        lower.append(max(neg) if neg else None)
        upper.append(min(pos) if pos else None)
    return lower, upper


def merge_intervals(pieces: Sequence[Interval]) -> tuple[Interval, ...]:
    """Union of intervals as sorted, disjoint pieces."""
    out: list[list[float]] = []
    for p in sorted(pieces, key=lambda p: (p.low, p.high)):
        if out and p.low <= out[-1][1]:
            out[-1][1] = max(out[-1][1], p.high)
        else:
            out.append([p.low, p.high])
    return tuple(Interval(lo, hi) for lo, hi in out)
