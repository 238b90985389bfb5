r"""The weak-IV-robust sensitivity set with several instruments, certified by interval bounds.

The set is ``{β : g(β) ≤ 0}`` with

.. math::

    g(β) = Q(β) - χ^2, \qquad
    Q(β) = \min_{γ∈Γ} x(β, γ)' V(β)^{-1} x(β, γ), \quad x = ρ - βπ - γ,
    \quad V(β) = V_{ρρ} - β (V_{ρπ} + V_{ρπ}') + β^2 V_{ππ}.

A grid can miss a piece narrower than its step; here every stretch of the line is either
*proved* outside the set, *proved* inside it, or holds a boundary point found by root finding.

**Two charts cover the whole line.**  With a centre ``c`` and a radius ``R``: ``β = c + t`` for
``|t| ≤ R`` and ``β = c + 1/u`` for ``0 < |u| ≤ 1/R`` (``u = 0`` is ``β = ±∞``).  Multiplying
``x`` by ``u`` and ``V`` by ``u²`` leaves ``Q`` unchanged, and both charts take one form:

.. math::

    x(s, γ) = p_0 + s p_1 - w(s) γ, \qquad V(s) = M_0 + s M_1 + s^2 M_2, \quad M_2 ⪰ 0,

with ``(p₀, p₁, M₀, M₁, M₂, w) = (ρ - cπ, -π, V(c), V'(c), V_{ππ}, 1)`` in ``t`` and
``(-π, ρ - cπ, V_{ππ}, V'(c), V(c), s)`` in ``u``.  So the tails, and whether the set is
unbounded (``Q → π'V_{ππ}^{-1}π`` at ``u = 0``), are settled by the same bounds as the middle.

**Lower bound on** ``[a, b]`` (to prove that no point of the set lies there).  For every λ,
``x'V^{-1}x ≥ 2λ'x - λ'Vλ`` (expand ``(x - Vλ)'V^{-1}(x - Vλ) ≥ 0``), so

.. math::

    Q(s) ≥ h(s) = 2λ'(p_0 + s p_1) - 2σ_Γ(w(s)λ) - λ'V(s)λ,

with ``σ_Γ`` the support function of Γ (a box: a sum of ``max(λ_j l_j, λ_j h_j)``; a polytope:
the largest ``λ'v`` over its vertices).  ``h`` is concave in ``s`` (``λ'M₂λ ≥ 0``, and
``σ_Γ(sλ)`` is convex in ``s``), so ``min h`` over ``[a, b]`` is ``min(h(a), h(b))``.  λ is
``V^{-1}x`` at the midpoint's minimiser, where the bound is tight (there γ* maximises
``w λ'γ`` over Γ, the optimality condition of the minimisation).  If ``min(h(a), h(b)) > χ²``
the interval holds no point of the set.

**Upper bound on** ``[a, b]`` (to prove that all of it is in the set).  Let ``δ(s)`` interpolate
``w(a)γ*(a)`` and ``w(b)γ*(b)`` linearly; ``δ(s) ∈ w(s)Γ`` since ``{(s, δ) : δ ∈ w(s)Γ}`` is
convex on each side of ``s = 0`` (a cone in the ``u`` chart; the charts never straddle 0).
``V(s) ⪰ T(s) = V(m) + (s - m)V'(m)``, its tangent at the midpoint (the gap is
``(s - m)² M₂``).  ``T`` is affine, so positive definite on ``[a, b]`` when it is at both ends;
then ``Q(s) ≤ x'V^{-1}x ≤ x'T^{-1}x`` with ``x = p₀ + s p₁ - δ(s)`` affine, and ``(x, Y) ↦
x'Y^{-1}x`` is jointly convex: the bound is convex in ``s`` and its maximum is at an end.  If
that maximum is ``≤ χ²`` all of ``[a, b]`` is in the set.

**Bisection.**  An interval whose two ends are on different sides holds a boundary point: it is
found by ``brentq`` and enclosed in a sliver of half-width :data:`ROOT_STEP` (relative) whose
ends are on the two sides; the parts beside it are settled in turn.  An interval with both ends
on one side that its bound does not settle is halved.  A stretch narrower than
:data:`REL_WIDTH` (relative) that is still unsettled — and every sliver — is *included* in the
reported set, so it is an outer bound, never narrower than the true set.  Comparisons with
``χ²`` keep a relative margin :data:`MARGIN` for rounding; the polytope's minimisers come from
a quadratic programme (feasible to the solver's tolerance), the box's from bounded least
squares (exact).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from sensiv.core.results import Interval
from sensiv.estimation import linalg
from sensiv.sensitivity.direct_sets import DirectSet
from sensiv.sensitivity.robust_minimiser import Minimiser, make_minimiser, make_support, whitening
from sensiv.sensitivity.union import merge_intervals

REL_WIDTH = 1e-10
"""An interval still unsettled at this width (relative to the chart's scale) is included."""
ROOT_STEP = 1e-13
"""First half-width (relative) of the sliver that encloses a boundary point found by root
finding; it grows fourfold until both ends clear χ² by ten times :data:`MARGIN` (so the
intervals beside it can be proved), at most to :data:`REL_WIDTH`."""
MARGIN = 1e-12
"""Relative margin on every comparison with χ² (floating-point rounding)."""
MAX_EVALUATIONS = 5000
"""Minimisations allowed before the remaining unsettled intervals are included as they are."""

CERTIFIED = ("certified: interval bounds prove every gap and every piece; each boundary found by "
             "root finding, enclosed within 1e-10 relative and included")
OUTER = ("certified outer bound: interval bounds prove every gap; {n} stretch(es) narrower than "
         "1e-10 relative that they do not settle are included")
BUDGET = ("certified outer bound: the budget of {n} minimisations ran out; the stretches not "
          "yet settled are included")


@dataclass(frozen=True, slots=True)
class Chart:
    """``x(s, γ) = p₀ + s p₁ − w(s) γ`` and ``V(s) = M₀ + s M₁ + s² M₂``; ``projective``:
    ``w(s) = s`` and ``β = centre + 1/s``, else ``w(s) = 1`` and ``β = centre + s``."""

    p0: np.ndarray
    p1: np.ndarray
    m0: np.ndarray
    m1: np.ndarray
    m2: np.ndarray
    projective: bool
    centre: float
    radius: float

    @property
    def outer_end(self) -> float:
        """``1/R``: the end of the ``u`` chart, where it meets the middle one."""
        return 1.0 / self.radius

    def weight(self, s: float) -> float:
        return s if self.projective else 1.0

    def v(self, s: float) -> np.ndarray:
        return self.m0 + s * self.m1 + (s * s) * self.m2

    def tangent(self, m: float, s: float) -> np.ndarray:
        return self.v(m) + (s - m) * (self.m1 + (2.0 * m) * self.m2)

    def resolution(self, s: float) -> float:
        """The length that :data:`REL_WIDTH` and :data:`ROOT_STEP` are relative to at ``s``:
        ``|β|`` in the middle chart and ``|u|`` outside (so ``|β − c|`` relatively), floored
        at 1e-4 of the chart's own size so that steps stay far above rounding."""
        if self.projective:
            return max(abs(s), 1e-4 * self.outer_end)
        size = max(self.radius, abs(self.centre))
        return max(abs(self.centre + s), 1e-4 * size)

    def to_beta(self, low: float, high: float) -> Interval:
        """The β-interval of ``[low, high]`` in this chart (the ``u`` chart reverses order)."""
        if not self.projective:
            return Interval(self.centre + low, self.centre + high)

        def beta(u: float, at_zero: float) -> float:
            if u == 0.0:
                return at_zero
            if abs(u) == self.outer_end:
                return self.centre + math.copysign(self.radius, u)
            return self.centre + 1.0 / u

        return Interval(beta(high, -math.inf), beta(low, math.inf))


def charts(rho, pi, v_rr, v_rp, v_pp, centre: float, radius: float) -> tuple[Chart, Chart]:
    """The middle chart ``β = c + t`` and the outer chart ``β = c + 1/u`` of the module
    docstring."""
    s = v_rp + v_rp.T
    v_c = v_rr - centre * s + centre * centre * v_pp
    dv_c = -s + 2.0 * centre * v_pp
    rho_c = rho - centre * pi
    middle = Chart(rho_c, -pi, v_c, dv_c, v_pp, False, centre, radius)
    outer = Chart(-pi, rho_c, v_pp, dv_c, v_c, True, centre, radius)
    return middle, outer


@dataclass(frozen=True, slots=True)
class Point:
    """``g = Q − χ²`` at ``s``, the minimiser γ*, and λ = V⁻¹x at γ*."""

    s: float
    g: float
    gamma: np.ndarray
    lam: np.ndarray


def evaluate(chart: Chart, minimiser: Minimiser, critical: float, s: float) -> Point:
    """``g``, γ* and λ at ``s`` of ``chart``."""
    whiten = whitening(chart.v(s))
    w = chart.weight(s)
    target = whiten @ (chart.p0 + s * chart.p1)
    value, gamma = minimiser(whiten, target, w)
    residual = target - w * (whiten @ gamma)
    return Point(s, value - critical, gamma, whiten.T @ residual)


def lower_bound(chart: Chart, support, a: float, b: float, mid: Point) -> float:
    """``min(h(a), h(b))``: a lower bound of ``Q`` on ``[a, b]`` (module docstring)."""
    lam = mid.lam

    def h(s: float) -> float:
        return float(2.0 * lam @ (chart.p0 + s * chart.p1)
                     - 2.0 * support(chart.weight(s) * lam) - lam @ chart.v(s) @ lam)

    return min(h(a), h(b))


def upper_bound(chart: Chart, pa: Point, pb: Point) -> float:
    """An upper bound of ``Q`` on ``[a, b]`` (module docstring); ``inf`` where the tangent of
    ``V`` is not positive definite at an end."""
    m = 0.5 * (pa.s + pb.s)
    worst = 0.0
    for p in (pa, pb):
        t = chart.tangent(m, p.s)
        x = chart.p0 + p.s * chart.p1 - chart.weight(p.s) * p.gamma
        try:
            with np.errstate(invalid="ignore", divide="ignore"):
                z = linalg.scaled_cholesky(t).whiten(x)
        except (np.linalg.LinAlgError, ValueError):
            return math.inf
        if not np.all(np.isfinite(z)):
            return math.inf
        worst = max(worst, float(z @ z))
    return worst


@dataclass(slots=True)
class Settler:
    """The bisection of the module docstring over one chart; ``kept`` collects the intervals
    (in chart coordinates) that the reported set includes."""

    chart: Chart
    minimiser: Minimiser
    support: Callable[[np.ndarray], float]
    critical: float
    budget: list[int]
    cache: dict
    kept: list
    unsettled: int = 0

    def point(self, s: float) -> Point:
        if s not in self.cache:
            self.budget[0] -= 1
            self.cache[s] = evaluate(self.chart, self.minimiser, self.critical, s)
        return self.cache[s]

    def run(self, low: float, high: float) -> None:
        stack = [(low, high)]
        while stack:
            a, b = stack.pop()
            if not b > a:
                continue
            pa, pb = self.point(a), self.point(b)
            if self.budget[0] <= 0:
                self.kept.append((a, b))
                self.unsettled += 1
                continue
            if (pa.g <= 0) != (pb.g <= 0):
                stack.extend(self.split_at_root(pa, pb))
            elif b - a <= REL_WIDTH * self.chart.resolution(0.5 * (a + b)):
                self.kept.append((a, b))
                self.unsettled += 1
            elif not self.settled(pa, pb):
                m = 0.5 * (a + b)
                if not a < m < b:  # no float between: keep it (never reached in practice)
                    self.kept.append((a, b))
                    self.unsettled += 1
                    continue
                stack.extend([(a, m), (m, b)])

    def settled(self, pa: Point, pb: Point) -> bool:
        """True when a bound proves ``[a, b]`` inside (then kept) or outside the set."""
        crit = self.critical
        if pa.g <= 0:
            if upper_bound(self.chart, pa, pb) <= crit * (1.0 - MARGIN):
                self.kept.append((pa.s, pb.s))
                return True
            return False
        mid = self.point(0.5 * (pa.s + pb.s))
        return mid.g > 0 and lower_bound(self.chart, self.support, pa.s, pb.s,
                                         mid) > crit * (1.0 + MARGIN)

    def split_at_root(self, pa: Point, pb: Point) -> list[tuple[float, float]]:
        """A boundary point in ``[a, b]`` by ``brentq``, enclosed in a kept sliver whose ends
        are on the sides of ``a`` and ``b``; returns the two parts beside it."""
        from scipy.optimize import brentq

        a, b = pa.s, pb.s
        res = self.chart.resolution
        root = brentq(lambda s: self.point(s).g, a, b, xtol=0.1 * ROOT_STEP * res(a),
                      rtol=4 * np.finfo(float).eps)
        step = ROOT_STEP * res(root)
        clear = 10.0 * MARGIN * self.critical
        while True:
            left, right = max(a, root - step), min(b, root + step)
            gl, gr = self.point(left).g, self.point(right).g
            ok = (gl <= 0) == (pa.g <= 0) and (gr <= 0) == (pb.g <= 0)
            if step > REL_WIDTH * res(root) or (ok and min(abs(gl), abs(gr)) > clear):
                break
            step *= 4.0
        self.kept.append((left, right))
        if not ok:
            self.unsettled += 1
        return [(a, left), (right, b)]


def certified_set(rho, pi, v_rr, v_rp, v_pp, critical: float, dset: DirectSet, centre: float,
                  radius: float) -> tuple[tuple[Interval, ...], str]:
    """``{β : g(β) ≤ 0}`` as sorted disjoint pieces, with the method's description.

    ``centre`` and ``radius`` choose the middle chart ``[c − R, c + R]`` (any choice gives a
    certified answer; one that holds the set's bounded pieces is the fastest).
    """
    minimiser, support = make_minimiser(dset), make_support(dset)
    middle, outer = charts(rho, pi, v_rr, v_rp, v_pp, centre, radius)
    budget = [MAX_EVALUATIONS]
    pieces, unsettled = [], 0
    for chart, spans in ((middle, [(-radius, radius)]),
                         (outer, [(-outer.outer_end, 0.0), (0.0, outer.outer_end)])):
        settler = Settler(chart, minimiser, support, critical, budget, {}, [])
        for low, high in spans:
            settler.run(low, high)
        pieces.extend(chart.to_beta(lo, hi) for lo, hi in settler.kept)
        unsettled += settler.unsettled
    if budget[0] <= 0:
        method = BUDGET.format(n=MAX_EVALUATIONS)
    elif unsettled:
        method = OUTER.format(n=unsettled)
    else:
        method = CERTIFIED
    return merge_intervals(pieces), method
