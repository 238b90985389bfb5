r"""Direct effects bounded per instrument in a table of summary associations: identified set,
union of intervals, bias-aware interval, breakdown and curve — all in closed form.

With a direct effect ``α_j`` of instrument *j*, ``b_{y,j} = β b_{x,j} + α_j``.  The IVW
estimate (:func:`sensiv.sensitivity.associations.ivw`) with its weights ``w_j = 1/σ_j²``
**held fixed at their values from the observed associations** (first-order weights by default;
second-order weights would move with ``α`` through ``b_y``, and that is ignored) corrected for a
known ``α`` is

.. math::

    \hat β(α) = \frac{\sum_j w_j (b_{y,j} - α_j)/b_{x,j}}{\sum_j w_j}
             = \hat β - \sum_j \tilde w_j α_j, \qquad
    \tilde w_j = \frac{w_j}{b_{x,j} \sum_k w_k},

linear in ``α`` with a standard error ``s`` that does not depend on ``α`` (the fixed-effect SE
by default, or the multiplicative random-effects SE of the observed table, held fixed too).
Over a set Γ scaled by ``t ≥ 0`` (about zero), with ``m ≤ \tilde w'α ≤ M`` the range of the
bias over Γ (closed form for a box, two linear programmes for a polytope:
:func:`~sensiv.sensitivity.per_instrument_sets.allowance_range`):

* identified set ``[β̂ − tM, β̂ − tm]``;
* union of the intervals ``β̂(α) ± z s``: ``[β̂ − tM − zs, β̂ − tm + zs]`` (Conley, Hansen &
  Rossi 2012's union, exact here since the ends are linear in α);
* bias-aware interval (Armstrong & Kolesár 2021): the estimate at the centre of the set —
  any α whose bias is the midpoint ``t(M + m)/2`` of the bias range (for a box: its centre) —,
  worst-case bias ``B = t(M − m)/2`` and half-width ``cv_α(B/s)·s``
  (:func:`sensiv.sensitivity.bias_aware.critical_value`).  Since ``s`` is constant over Γ and
  ``cv_α(u) ≤ u + z``, it is never longer than the union;
* breakdown scale of the conclusion "interval above the threshold θ" (below: mirrored):
  ``t* = (β̂ − zs − θ)/M`` for the union (none when ``M ≤ 0``); for the bias-aware interval the
  root of ``g(t) = β̂ − tc − s·cv_α(tB₁/s) − θ`` (``c``, ``B₁`` the midpoint and half-range at
  ``t = 1``).  ``g`` is concave (``cv_α`` is convex) with ``g(0) > 0``, so it changes sign at
  most once; ``cv_α(u) ≤ u + z`` and ``cv_α(u) ≥ u + z_{1−α}`` bracket the root in
  ``[t*, (β̂ − θ − s z_{1−α})/M]``, refined by Brent's method to ``1e-12``.

Breakdown scales beyond :data:`~sensiv.sensitivity.union.SCALE_MAX` are reported as none.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from sensiv.core.errors import InputError
from sensiv.core.limits import MAX_POINTS, check_count
from sensiv.core.results import Interval, format_number, json_number
from sensiv.estimation import distributions as dist
from sensiv.sensitivity.associations import Associations, WeightOrder, ivw
from sensiv.sensitivity.bias_aware import critical_value
from sensiv.sensitivity.bounds import (CAUTION, DEFAULT_POINTS, EXTEND_FACTOR, Curve,
                                      conclusion_text)
from sensiv.sensitivity.per_instrument_sets import (UNIT_WORDS, Allowance, allowance_range,
                                                    box_allowance)
from sensiv.sensitivity.union import SCALE_MAX

SE_RULES = ("fixed", "random")
CENTRE = "midpoint of the bias range over the set (for a box: its centre)"
WEIGHTING = "ivw"
SCALE_TOL = 1e-12


# ============================================================================ the linear core
@dataclass(frozen=True, slots=True)
class LinearIVW:
    """The IVW estimate as a function of the direct effects: ``β̂(α) = estimate − slope'α``
    with the constant standard error ``se`` (weights held fixed)."""

    estimate: float
    slope: np.ndarray
    se: float
    order: str
    se_rule: str
    confidence_level: float

    @property
    def z(self) -> float:
        return dist.normal_quantile(0.5 + self.confidence_level / 2.0)

    def interval(self) -> Interval:
        """The IVW interval at zero direct effect."""
        return Interval(self.estimate - self.z * self.se, self.estimate + self.z * self.se)


def linear_ivw(assoc: Associations, order: WeightOrder = "first", se: str = "fixed",
               confidence_level: float = 0.95) -> LinearIVW:
    """The slope ``w̃_j = w_j / (b_{x,j} Σw)`` and SE of the IVW estimate (module docstring)."""
    if se not in SE_RULES:
        raise InputError(f"se {se!r} is not one of {', '.join(SE_RULES)}")
    if not 0.0 < confidence_level < 1.0:
        raise InputError(f"confidence level {confidence_level} is outside (0, 1); give e.g. 0.95")
    fit = ivw(assoc, order, confidence_level)
    slope = fit.weights / assoc.first_stage / float(fit.weights.sum())
    s = fit.se_fixed if se == "fixed" else fit.se_random
    return LinearIVW(fit.estimate, slope, s, order, se, confidence_level)


# ============================================================================ results
@dataclass(frozen=True, slots=True)
class IVWBiasAware:
    """The bias-aware interval ``estimate ± critical_value·se`` of the IVW estimate."""

    ci: Interval
    estimate: float
    max_bias: float
    se: float
    critical_value: float
    centre: str = CENTRE
    weighting: str = WEIGHTING

    def to_dict(self) -> dict:
        return {"ci": self.ci.to_list(), "estimate": json_number(self.estimate),
                "max_bias": json_number(self.max_bias), "se": json_number(self.se),
                "critical_value": json_number(self.critical_value),
                "weighting": self.weighting, "centre": self.centre}


@dataclass(frozen=True, slots=True)
class ScaleBreakdown:
    """Where the conclusion breaks as the set is scaled by ``t``; ``scale`` for the union,
    ``bias_aware_scale`` for the bias-aware interval (``0.0``: no conclusion at zero direct
    effect; ``None``: it holds up to :data:`~sensiv.sensitivity.union.SCALE_MAX`).

    ``allowance``/``bias_aware_allowance``: the scale times the stated range's largest
    ``|value|`` in the user's unit (``None`` for a polytope); ``direct_outcome``: per instrument
    the largest ``|α_j|`` of the scaled set in outcome units; ``direct_lower``/``direct_upper``:
    per instrument alone (the others without direct effect), the direct effects nearest zero
    below and above at which the union reaches the threshold (outcome units).
    """

    threshold: float
    conclusion: str
    scale: float | None
    bias_aware_scale: float | None
    unit: str
    allowance: float | None
    bias_aware_allowance: float | None
    direct_outcome: tuple[float | None, ...]
    bias_aware_direct_outcome: tuple[float | None, ...]
    direct_lower: tuple[float | None, ...]
    direct_upper: tuple[float | None, ...]

    def to_dict(self) -> dict:
        return {"threshold": self.threshold, "conclusion": self.conclusion,
                "scale": json_number(self.scale),
                "bias_aware_scale": json_number(self.bias_aware_scale),
                "unit": self.unit, "allowance": json_number(self.allowance),
                "bias_aware_allowance": json_number(self.bias_aware_allowance),
                "direct_outcome": [json_number(v) for v in self.direct_outcome],
                "bias_aware_direct_outcome": [json_number(v)
                                              for v in self.bias_aware_direct_outcome],
                "direct_lower": [json_number(v) for v in self.direct_lower],
                "direct_upper": [json_number(v) for v in self.direct_upper]}


@dataclass(frozen=True, slots=True)
class DirectEffects:
    """Direct effects bounded per instrument: what the IVW estimate allows over Γ."""

    instruments: tuple[str, ...]
    focus: str
    core: LinearIVW
    allowance: Allowance
    bias_range: tuple[float, float]
    identified_set: Interval
    union_ci: Interval
    bias_aware: IVWBiasAware
    breakdown: ScaleBreakdown
    curve: Curve
    curve_extended: Curve | None

    @property
    def confidence_level(self) -> float:
        return self.core.confidence_level

    def assumptions(self) -> list[str]:
        level = f"{100 * self.confidence_level:g}%"
        shape = ("a box" if self.allowance.is_box else "a polytope")
        return [f"the direct effect α_j of each instrument on the outcome lies in {shape}: "
                f"{self.allowance.text} ({UNIT_WORDS[self.allowance.unit]})",
                f"IVW estimate with {self.core.order}-order weights held fixed at their values "
                "from the observed associations, so that it is linear in the direct effects",
                f"{self.core.se_rule}-effect standard error held fixed over the set; union of "
                f"{level} intervals covers β at least at that rate when the true direct effects "
                "lie in the set",
                "the per-instrument associations are approximately normal and independent "
                "across instruments (independent instruments, e.g. uncorrelated variants)",
                f"bias-aware interval: the IVW estimate at the {CENTRE}, biased by at most "
                f"{format_number(self.bias_aware.max_bias)} over the set"]

    def to_dict(self) -> dict:
        unit = self.allowance.radius_in_unit
        rows = self.curve.to_list()
        if unit is not None:
            for row in rows:
                row["allowance"] = row["scale"] * unit
        extended = self.curve_extended.to_list() if self.curve_extended is not None else None
        return {"estimate": json_number(self.core.estimate), "se": json_number(self.core.se),
                "weights": self.core.order, "se_rule": self.core.se_rule,
                "confidence_level": self.confidence_level,
                "direct_set": self.allowance.to_dict(),
                "bias_range": [json_number(v) for v in self.bias_range],
                "identified_set": self.identified_set.to_list(),
                "union_ci": self.union_ci.to_list(),
                "bias_aware": self.bias_aware.to_dict(),
                "breakdown": self.breakdown.to_dict(), "curve": rows,
                "curve_extended": extended,
                "assumptions": self.assumptions(), "caution": CAUTION}


# ============================================================================ closed forms
def identified_at(core: LinearIVW, bias: tuple[float, float], t: float) -> Interval:
    """``[β̂ − tM, β̂ − tm]``."""
    return Interval(core.estimate - t * bias[1], core.estimate - t * bias[0])


def union_at(core: LinearIVW, bias: tuple[float, float], t: float) -> Interval:
    """``[β̂ − tM − zs, β̂ − tm + zs]``."""
    half = core.z * core.se
    return Interval(core.estimate - t * bias[1] - half, core.estimate - t * bias[0] + half)


def bias_aware_at(core: LinearIVW, bias: tuple[float, float], t: float) -> IVWBiasAware:
    """The bias-aware interval over ``tΓ`` (module docstring)."""
    centre = 0.5 * t * (bias[0] + bias[1])
    worst = 0.5 * t * (bias[1] - bias[0])
    estimate = core.estimate - centre
    cv = critical_value(worst / core.se, core.confidence_level)
    return IVWBiasAware(Interval(estimate - cv * core.se, estimate + cv * core.se), estimate,
                        worst, core.se, cv)


def _mirrored(core: LinearIVW, bias: tuple[float, float], threshold: float
              ) -> tuple[float, float, float] | None:
    """``(d, M, c)`` on the side of the conclusion: ``d = side·(β̂ − θ)``, ``M`` the largest
    bias against it and ``c`` the bias midpoint, both signed by ``side``; None without one."""
    base = core.interval()
    if base.contains(threshold):
        return None
    side = 1.0 if base.low > threshold else -1.0
    m, big = (bias[0], bias[1]) if side > 0 else (-bias[1], -bias[0])
    return side * (core.estimate - threshold), big, 0.5 * (m + big)


def union_scale(core: LinearIVW, bias: tuple[float, float], threshold: float) -> float | None:
    """``t* = (d − zs)/M`` (exact; ``0.0`` without a conclusion, ``None`` when never)."""
    mirrored = _mirrored(core, bias, threshold)
    if mirrored is None:
        return 0.0
    d, big, _ = mirrored
    if big <= 0.0:
        return None
    t = (d - core.z * core.se) / big
    return t if t <= SCALE_MAX else None


def bias_aware_scale(core: LinearIVW, bias: tuple[float, float],
                     threshold: float) -> float | None:
    """The root of the concave gap ``g`` (module docstring), by Brent's method on an exact
    bracket; ``0.0`` without a conclusion, ``None`` when there is none up to ``SCALE_MAX``."""
    from scipy.optimize import brentq

    mirrored = _mirrored(core, bias, threshold)
    if mirrored is None:
        return 0.0
    d, big, mid = mirrored
    if big <= 0.0:
        return None
    half_range = big - mid
    s, level = core.se, core.confidence_level

    def gap(t: float) -> float:
        return d - t * mid - s * critical_value(t * half_range / s, level)

    low = (d - core.z * s) / big
    # the upper end of the bracket is tight for a large bias, where rounding can leave the
    # gap a hair above zero: widen it by a relative 1e-6
    high = (d - s * dist.normal_quantile(level)) / big * (1.0 + 1e-6)
    if low > SCALE_MAX:
        return None
    high = min(high, SCALE_MAX)
    if gap(high) > 0.0:
        return None
    if gap(low) <= 0.0:
        return low
    return float(brentq(gap, low, high, xtol=SCALE_TOL, rtol=SCALE_TOL, maxiter=200))


def alone_breakdown(core: LinearIVW, threshold: float
                    ) -> tuple[tuple[float | None, ...], tuple[float | None, ...]]:
    """Per instrument alone: ``α_j = side·(d − zs)/w̃_j`` read as a lower or upper end."""
    mirrored = _mirrored(core, (0.0, 0.0), threshold)
    n = core.slope.size
    if mirrored is None:
        return (0.0,) * n, (0.0,) * n
    side = 1.0 if core.estimate > threshold else -1.0
    gap = mirrored[0] - core.z * core.se
    lower, upper = [], []
    for w in core.slope:
        value = side * gap / float(w) if w != 0.0 else math.inf
        lower.append(value if value < 0.0 else None)
        upper.append(value if 0.0 < value < math.inf else None)
    return tuple(lower), tuple(upper)


def curve_over(core: LinearIVW, bias: tuple[float, float], scales: np.ndarray) -> Curve:
    """Union, identified set and bias-aware interval at every scale."""
    rows = [(union_at(core, bias, t), identified_at(core, bias, t),
             bias_aware_at(core, bias, t).ci) for t in np.asarray(scales, float)]
    ends = np.array([[u.low, u.high, i.low, i.high, b.low, b.high] for u, i, b in rows])
    return Curve(np.asarray(scales, float), *ends.T)


def _scaled(t: float | None, values) -> tuple[float | None, ...]:
    if t is None:
        return tuple(None for _ in values)
    return tuple(float(t * v) for v in values)


def scale_breakdown(core: LinearIVW, allowance: Allowance, bias: tuple[float, float],
                    threshold: float, focus: str) -> ScaleBreakdown:
    """The breakdown of the conclusion at ``threshold`` (union and bias-aware)."""
    t_union = union_scale(core, bias, threshold)
    t_ba = bias_aware_scale(core, bias, threshold)
    unit = allowance.radius_in_unit
    lower, upper = alone_breakdown(core, threshold)
    return ScaleBreakdown(
        float(threshold), conclusion_text(focus, core.interval(), threshold, False), t_union,
        t_ba, allowance.unit, None if unit is None or t_union is None else t_union * unit,
        None if unit is None or t_ba is None else t_ba * unit,
        _scaled(t_union, allowance.radius), _scaled(t_ba, allowance.radius), lower, upper)


def direct_effects(assoc: Associations, allowance: Allowance | str, *,
                   threshold: float = 0.0, confidence_level: float = 0.95,
                   order: WeightOrder = "first", se: str = "fixed",
                   points: int = DEFAULT_POINTS, focus: str = "exposure") -> DirectEffects:
    """Direct-effect sensitivity of the IVW estimate over a set Γ (module docstring).

    Parameters
    ----------
    assoc : Associations
    allowance : Allowance or str
        The set Γ, or one range for every instrument such as ``"-2:2se"``
        (:func:`~sensiv.sensitivity.per_instrument_sets.parse_allowance`).
    threshold : float
        The conclusion examined is ``β > threshold`` (or ``<``, whichever the IVW interval at
        zero direct effect supports).
    points : int
        Curve points over scales ``t ∈ [0, 1]``; past a breakdown beyond the set a second curve
        (``curve_extended``) runs to ``1.15 t*``.

    Examples
    --------
    >>> from sensiv.sensitivity.associations import check_associations
    >>> a = check_associations(first_stage=[0.1, 0.2], first_stage_se=[0.01, 0.01],
    ...                        reduced_form=[0.05, 0.1], reduced_form_se=[0.01, 0.01])
    >>> r = direct_effects(a, "-0:0se")
    >>> r.union_ci == r.core.interval()
    True
    """
    if isinstance(allowance, str):
        allowance = box_allowance(assoc, allowance)
    points = check_count(points, "--points", 2, MAX_POINTS, "curve points")
    if not math.isfinite(threshold):
        raise InputError(f"threshold {threshold} must be a finite number")
    core = linear_ivw(assoc, order, se, confidence_level)
    bias = allowance_range(allowance, core.slope)
    if not (math.isfinite(bias[0]) and math.isfinite(bias[1])):
        raise InputError("the direct-effect polytope is unbounded in a direction that moves the "
                         "IVW estimate, so no bound holds; add constraints that bound it")
    breakdown = scale_breakdown(core, allowance, bias, threshold, focus)
    curve = curve_over(core, bias, np.linspace(0.0, 1.0, points))
    far = [t for t in (breakdown.scale, breakdown.bias_aware_scale) if t is not None]
    extended = None
    if far and max(far) > 1.0:
        top = min(EXTEND_FACTOR * max(far), SCALE_MAX)
        extended = curve_over(core, bias, np.linspace(0.0, top, points))
    return DirectEffects(assoc.names, focus, core, allowance, bias,
                         identified_at(core, bias, 1.0), union_at(core, bias, 1.0),
                         bias_aware_at(core, bias, 1.0), breakdown, curve, extended)
