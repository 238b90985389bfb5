r"""Bias-aware confidence intervals centred at 2SLS (Armstrong & Kolesár 2021, "Sensitivity
analysis using approximate moment condition models", Quantitative Economics).

The direct effect ``γ`` is only known to lie in a set Γ.  Take the 2SLS estimator evaluated at a
centre ``γ_c`` of Γ, ``b = β̂(γ_c) = β̂ − a'γ_c``, with standard errors ``√q(γ)`` from the
variance quadratic of :mod:`sensiv.sensitivity.linear_core`.  Its bias for any true ``γ ∈ Γ``
is ``−a'(γ − γ_c)``, at most ``B = max_{γ∈Γ} |a'(γ − γ_c)|`` in absolute value.  The
paper's local misspecification keeps the standard error the same over Γ; here Γ is not local
and the 2SLS variance changes with ``γ`` (the residual does), so ``s`` is the largest standard
error over Γ, ``s = max_{γ∈Γ} √q(γ)`` (at a vertex: ``q`` is convex; for a box found by
:func:`~sensiv.sensitivity.union_sets.largest_se_set` without enumerating its corners, an
upper bound when its branch and bound stops early), which keeps the
guarantee whichever ``γ ∈ Γ`` is true — with ``s = √q(γ_c)`` a simulation with the true
direct effect at a corner covered 93% for a nominal 95% (n = 250, robust errors); the standard
error at the centre is reported as ``se_centre``.  The interval

.. math::

    b \pm \mathrm{cv}_α(B/s)\, s,\qquad \mathrm{cv}_α(t) = \text{the } 1-α
    \text{ quantile of } |N(t, 1)|,

covers β with probability at least ``1 − α`` (asymptotically) for every ``γ ∈ Γ``: the
standardised error is ``N(bias/s, 1)`` with ``|bias/s| ≤ B/s`` and ``P(|N(t,1)| ≤ c)``
decreases in ``|t|``.

Only the 2SLS-centred interval is computed here (``weighting = "2sls"``); the paper's
optimally weighted estimator for overidentified models is in
:mod:`sensiv.sensitivity.optimal_weights` (which scores its candidates with :func:`bias_aware`).

Centres: for a box, its centre (then ``B = |a|'h`` with ``h`` the half-widths); for a polytope,
its Chebyshev centre (the centre of the largest inscribed ball, one linear programme), with
``B`` from the vertices (the maximum of a linear function over a polytope is attained at a
vertex).  The centre is named in the ``centre`` key.

Why the interval is never longer than the union of intervals when ``s`` is constant over Γ and
Γ is a box (so that ``a'(γ − γ_c)`` ranges over ``[−B, B]``): the union of the intervals
``β̂ − a'γ ± z s`` over Γ is ``b ± (B + z s)`` with ``z = z_{1−α/2}``, while
``cv_α(t) ≤ t + z`` because ``|Z + t| ≤ t + z`` holds whenever ``|Z| ≤ z`` (the event
``{−2t − z ≤ Z ≤ z}`` contains ``{−z ≤ Z ≤ z}``, which has probability ``1 − α``); so
``cv_α(B/s)·s ≤ B + z s``.  (For a polytope whose Chebyshev centre is not the midpoint of the
range of ``a'γ`` this need not hold.)
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from sensiv.core.errors import InputError
from sensiv.core.results import Interval, format_number, json_number
from sensiv.estimation import distributions as dist
from sensiv.partial_id.solver import solve
from sensiv.sensitivity.direct_sets import DirectSet
from sensiv.sensitivity.linear_core import Core
from sensiv.sensitivity.union import SCALE_MAX
from sensiv.sensitivity.union_sets import largest_se_set

WEIGHTING = "2sls"
SE_RULE = "largest standard error over the set"
BOX_CENTRE = "box centre"
CHEBYSHEV_CENTRE = "Chebyshev centre"
CV_TOL = 1e-13              # absolute tolerance of the critical value's root
SCALE_TOL = 1e-12           # tolerance of the bias-aware breakdown scale
_SQRT2 = math.sqrt(2.0)


# ============================================================================ the critical value
def _tail(c: float, t: float) -> float:
    """``P(|Z + t| > c)`` for ``Z ~ N(0, 1)``, from upper tails (accurate for large ``t``)."""
    return 0.5 * math.erfc((c - t) / _SQRT2) + 0.5 * math.erfc((c + t) / _SQRT2)


def critical_value(t: float, confidence_level: float = 0.95) -> float:
    """``cv_α(t)``: the ``1 − α`` quantile of ``|N(t, 1)|`` with ``α = 1 − confidence_level``.

    Solves ``P(|Z + t| ≤ c) = 1 − α`` for ``c`` by a bracketed root (Brent), bracket
    ``[max(z_{1−α/2}, t + z_{1−α}), t + z_{1−α/2}]``: the coverage of ``[−c, c]`` falls as
    ``|t|`` grows, so ``cv_α(t) ≥ cv_α(0) = z_{1−α/2}``; ``P(|Z+t| ≤ c) ≤ P(Z ≤ c − t)`` gives
    ``c ≥ t + z_{1−α}``; and ``|Z + t| ≤ t + z_{1−α/2}`` whenever ``|Z| ≤ z_{1−α/2}``.

    Examples
    --------
    >>> round(critical_value(0.0), 6)
    1.959964
    """
    from scipy.optimize import brentq

    if not 0.0 < confidence_level < 1.0:
        raise InputError(f"confidence level {confidence_level} is outside (0, 1); give e.g. 0.95")
    t = abs(float(t))
    if not math.isfinite(t):
        raise InputError("the bias-to-se ratio must be finite")
    alpha = 1.0 - confidence_level
    z_two = dist.normal_quantile(1.0 - alpha / 2.0)
    if t == 0.0:
        return z_two
    low = max(z_two, t + dist.normal_quantile(confidence_level))
    high = t + z_two
    f_low, f_high = _tail(low, t) - alpha, _tail(high, t) - alpha
    if f_low <= 0.0:
        return low
    if f_high >= 0.0:
        return high
    return float(brentq(lambda c: _tail(c, t) - alpha, low, high, xtol=CV_TOL,
                        rtol=4.0 * np.finfo(float).eps, maxiter=200))


# ============================================================================ the centre of Γ
@dataclass(frozen=True, slots=True)
class Centre:
    """A centre ``γ_c`` of Γ and how it was chosen (``words``).

    Over a scaling ``tΓ`` the centre is ``tγ_c`` and the worst-case bias (:func:`max_bias`)
    ``t`` times that over Γ: both sets are scaled about zero.
    """

    point: np.ndarray
    words: str
    half_widths: np.ndarray | None   # the box's half-widths; None for a polytope


def chebyshev_centre(dset: DirectSet) -> np.ndarray:
    """The Chebyshev centre of ``{γ : Aγ ≤ b}``: the centre of the largest inscribed ball.

    Programme (linear, cvxpy with HiGHS, status checked): maximise ``r`` over ``(γ, r)`` subject
    to ``A_i γ + r‖A_i‖ ≤ b_i`` for every row ``i`` and ``r ≥ 0``.
    """
    import cvxpy as cp

    a = np.asarray(dset.constraints, float)
    norms = np.linalg.norm(a, axis=1)
    gamma = cp.Variable(a.shape[1])
    radius = cp.Variable()
    problem = cp.Problem(cp.Maximize(radius),
                         [a @ gamma + radius * norms <= dset.rhs, radius >= 0])
    sol = solve(problem, what="Chebyshev-centre programme")
    if sol.outcome != "optimal":
        raise InputError(f"the direct-effect polytope has no Chebyshev centre (the programme "
                         f"is {sol.outcome}); check that its rows a'γ ≤ b bound a non-empty set")
    return np.asarray(gamma.value, float).ravel()


def set_centre(dset: DirectSet) -> Centre:
    """The box centre of a box, the Chebyshev centre of a polytope."""
    if dset.box is not None:
        lows = np.array([b.low for b in dset.box])
        highs = np.array([b.high for b in dset.box])
        return Centre(0.5 * (lows + highs), BOX_CENTRE, 0.5 * (highs - lows))
    return Centre(chebyshev_centre(dset), CHEBYSHEV_CENTRE, None)


def max_bias(slope: np.ndarray, dset: DirectSet, centre: Centre) -> float:
    """``B = max_{γ∈Γ} |a'(γ − γ_c)|``: ``|a|'h`` for a box, the vertices' maximum otherwise."""
    if centre.half_widths is not None:
        return float(np.abs(slope) @ centre.half_widths)
    return float(np.max(np.abs((dset.vertices - centre.point) @ slope)))


# ============================================================================ the interval
@dataclass(frozen=True, slots=True)
class BiasAware:
    """The bias-aware interval ``estimate ± critical_value · se`` over a direct-effect set.

    ``max_bias`` is the worst-case bias of ``estimate`` over the set, ``centre`` names the
    point the 2SLS estimator is evaluated at (``centre_point``).  ``se`` is the largest
    standard error of the 2SLS estimator over the set (``se_centre`` the one at the centre);
    with several candidate covariances (a published stress test) the least favourable one.
    """

    ci: Interval
    estimate: float
    max_bias: float
    se: float
    critical_value: float
    centre: str
    centre_point: tuple[float, ...]
    se_centre: float
    weighting: str = WEIGHTING

    def to_dict(self) -> dict:
        return {"ci": self.ci.to_list(), "estimate": self.estimate,
                "max_bias": self.max_bias, "se": self.se,
                "critical_value": json_number(self.critical_value),
                "weighting": self.weighting, "centre": self.centre,
                "centre_point": [float(v) for v in self.centre_point],
                "se_centre": self.se_centre, "se_rule": SE_RULE}

    def assumptions(self) -> list[str]:
        return [f"the true direct effect lies in the stated set; the 2SLS estimate at its "
                f"{self.centre} is biased by at most {format_number(self.max_bias)} there",
                "the estimate is approximately normal with a standard error no larger than the "
                "largest over the set (large-sample normal critical values, also with "
                "small-sample corrections)"]


def largest_se(cores: Sequence[Core], points: np.ndarray) -> float:
    """``max`` over the cores and the rows of ``points`` of ``√q(γ)``.

    The variance ``q`` is a convex quadratic in ``γ`` (its matrix is positive semi-definite),
    so over a polytope its maximum sits at a vertex: ``points`` = the vertices is exact.
    """
    return max(math.sqrt(float(np.max(core.variance(points)))) for core in cores)


def _half_width(s: float, bias: float, level: float) -> tuple[float, float]:
    """``(half-width, critical value)`` for standard error ``s`` and worst-case bias."""
    if s == 0.0:
        return (0.0 if bias == 0.0 else math.inf), math.inf
    cv = critical_value(bias / s, level)
    return cv * s, cv


def bias_aware(cores: Sequence[Core], dset: DirectSet, confidence_level: float, *,
               scale: float = 1.0, centre: Centre | None = None,
               unbounded: bool = False) -> BiasAware:
    """The bias-aware interval over ``scale·Γ`` (``unbounded``: the first stage is not
    significant, so the interval is the whole line, like the union)."""
    centre = centre if centre is not None else set_centre(dset)
    point = scale * centre.point
    bias = scale * max_bias(cores[0].slope, dset, centre)
    estimate = float(cores[0].beta(point)[0])
    s = largest_se_set(cores, dset, scale)
    half, cv = _half_width(s, bias, confidence_level)
    ci = (Interval(-math.inf, math.inf) if unbounded
          else Interval(estimate - half, estimate + half))
    return BiasAware(ci, estimate, bias, s, cv, centre.words, tuple(map(float, point)),
                     largest_se(cores, point[None, :]))


def bias_aware_curve(cores: Sequence[Core], dset: DirectSet, scales: np.ndarray,
                     confidence_level: float, *, unbounded: bool = False
                     ) -> tuple[np.ndarray, np.ndarray]:
    """Bias-aware interval ends over ``t·Γ`` for every ``t`` in ``scales``."""
    centre = set_centre(dset)
    lo, hi = [], []
    for t in np.asarray(scales, float):
        ci = bias_aware(cores, dset, confidence_level, scale=float(t), centre=centre,
                        unbounded=unbounded).ci
        lo.append(ci.low)
        hi.append(ci.high)
    return np.array(lo), np.array(hi)


def bias_aware_scale(cores: Sequence[Core], dset: DirectSet, threshold: float,
                     confidence_level: float, grid: np.ndarray) -> float | None:
    """Smallest ``t ≥ 0`` at which the bias-aware interval over ``tΓ`` reaches ``threshold``.

    ``0.0`` when the interval at zero direct effect contains it; ``None`` when the interval
    stays clear of it for every ``t ≤`` :data:`~sensiv.sensitivity.union.SCALE_MAX`.

    Method.  With ``side = ±1`` the side of the threshold the estimate lies on, the gap
    ``g(t) = side·(b(t) − θ) − h(t)`` of the near end of the interval to ``θ`` has
    ``b(t) = β̂ − t a'γ_c`` linear and ``h(t) = s(t)·cv_α(tB/s(t))`` the half-width, ``s(t)`` the largest standard error over
``tΓ`` (over the cores too).
    For a box centred at zero (``γ_c = 0``) ``b`` is constant, ``s(t)`` is even and convex in
    ``t`` (the box is symmetric about zero), hence non-decreasing on ``t ≥ 0``, and ``h``
    increases with ``t`` (``s·cv_α(B/s)`` increases in ``B`` and in ``s``), so ``g`` is monotone
    decreasing and has one root.  In general ``g`` need not be monotone, but it is concave:
    ``s(t) = max_{k,v} √q_k(t v)`` is a maximum of norms of affine maps of ``t`` (convex), and ``(B, s) ↦ s·cv_α(B/s)`` is the perspective
    of the convex ``cv_α`` (convexity checked numerically in the tests), hence jointly convex
    and non-decreasing in both arguments (``cv_α(u) − u·cv_α'(u) ≥ 0`` as ``cv_α(u) > u`` and
    ``cv_α' ≤ 1``); so ``h`` is convex and ``g`` concave, and a concave ``g`` with ``g(0) > 0``
    crosses zero at most once on ``t > 0``.  We scan ``g`` on ``grid`` (the curve's scales)
    extended geometrically to ``SCALE_MAX`` for the first sign change and refine it by Brent's
    method to ``1e-12``.
    """
    centre = set_centre(dset)
    at_zero = bias_aware(cores, dset, confidence_level, scale=0.0, centre=centre).ci
    if at_zero.contains(threshold):
        return 0.0
    side = 1.0 if at_zero.low > threshold else -1.0

    def gap(t: float) -> float:
        ci = bias_aware(cores, dset, confidence_level, scale=t, centre=centre).ci
        return side * ((ci.low if side > 0 else ci.high) - threshold)

    return first_crossing(gap, grid, FAR_POINTS)


FAR_POINTS = 121            # geometric scales from 1 to SCALE_MAX beyond the curve's grid


def first_crossing(gap, grid, far_points: int) -> float | None:
    """The first scale ``t > 0`` at which ``gap(t)`` (positive at 0) reaches zero: scanned on
    ``grid`` and ``far_points`` geometric scales from 1 to ``SCALE_MAX``, the first sign change
    refined by Brent's method to :data:`SCALE_TOL`; ``None`` when none up to ``SCALE_MAX``."""
    from scipy.optimize import brentq

    far = np.geomspace(1.0, SCALE_MAX, far_points)
    ts = np.unique(np.concatenate([np.asarray(grid, float), far]))
    previous = 0.0
    for t in ts[(ts > 0.0) & (ts <= SCALE_MAX)]:
        value = gap(float(t))
        if value <= 0.0:
            if value == 0.0:
                return float(t)
            return float(brentq(gap, previous, float(t), xtol=SCALE_TOL, rtol=SCALE_TOL,
                                maxiter=200))
        previous = float(t)
    return None
