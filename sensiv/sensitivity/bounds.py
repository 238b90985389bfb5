r"""Direct-effect sensitivity: what survives if the instrument has a direct effect ``γ``.

Model ``y = X β + W κ + Z γ + u``; the exclusion restriction sets ``γ = 0``.  For a *known*
``γ`` the focus coefficient is ``β̂(γ) = β̂ − a'γ`` with a variance quadratic in ``γ``
(:mod:`sensiv.sensitivity.linear_core`), so everything below — union of confidence intervals
over a set Γ (Conley, Hansen & Rossi 2012), curves, breakdown points — is evaluated exactly
from ``(β̂, a, Q)`` alone, at ``O(k³)`` per point.

This module is the sweep API: :func:`sweep` (from data) and :func:`analyse` (from a fit's
pieces) assemble a :class:`SweepResult` from the parts that live in their own modules:

* :mod:`~sensiv.sensitivity.direct_sets` — the set Γ, its ranges and units;
* :mod:`~sensiv.sensitivity.linear_core` — the core ``(β̂, a, Q)`` of the focus coefficient;
* :mod:`~sensiv.sensitivity.union` — union intervals, identified sets, breakdown scales;
* :mod:`~sensiv.sensitivity.frontier` — the breakdown frontier over thresholds;
* :mod:`~sensiv.sensitivity.robust_set` — the weak-instrument-robust (Anderson–Rubin) set;
* :mod:`~sensiv.sensitivity.bias_aware`, :mod:`~sensiv.sensitivity.optimal_weights` —
  bias-aware intervals centred at 2SLS and optimally weighted (overidentified models);
* :mod:`~sensiv.sensitivity.adaptive` — the falsification adaptive set (optional).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field, replace

import numpy as np

from sensiv.core.errors import InputError, WeakInstrumentWarning
from sensiv.core.limits import MAX_POINTS, check_count, overflow_guard
from sensiv.core.results import Interval, Presentable, describe, intervals_to_lists, json_number
from sensiv.data.where import filter_assumptions
from sensiv.estimation import iv
from sensiv.estimation.moments import ScoreSums
from sensiv.sensitivity.adaptive import AdaptiveResult, adaptive_set
from sensiv.sensitivity.at_points import AtPoint, AtValue, at_points, parse_at
from sensiv.sensitivity.bias_aware import (BiasAware, bias_aware, bias_aware_curve,
                                           bias_aware_scale)
from sensiv.sensitivity.breakdown_units import DirectUnits, direct_units
from sensiv.sensitivity.direct_sets import (DirectSet, RangeSpec, Scale, check_range_count,
                                            parse_range, read_polytope, resolve_ranges,
                                            scale_of_pieces, set_in_units)
from sensiv.sensitivity.frontier import Frontier, breakdown_frontier, frontier_thresholds
from sensiv.sensitivity.linear_core import (Core, build_core, first_stage_is_uninformative,
                                            focus_block, focus_index)
from sensiv.sensitivity.optimal_weights import OptimalBiasAware, moment_block, optimal_from_fit
from sensiv.sensitivity.robust_set import (MATERIAL_SHARE, differs_materially,  # noqa: F401
                                           reduced_form, robust_set)
from sensiv.sensitivity.union import SCALE_MAX, direct_breakdown, identified_set_lp
from sensiv.sensitivity.union_sets import (UnionMethod, breakdown_scale_set, remembering_se,
                                           identified_curve_set, union_curve_set)

DEFAULT_POINTS = 101
# When the breakdown lies beyond the stated set (1 < t* ≤ SCALE_MAX), a second curve runs to
# this multiple of t*, so a figure can show the stated set and the breakdown together.
EXTEND_FACTOR = 1.15
CAUTION = ("Caution: sensitivity bounds hold only under the assumed range of direct effects; "
           "they do not prove that the instrument is valid, and a wider violation than assumed "
           "can overturn any conclusion shown here.")


# ============================================================================ results
@dataclass(frozen=True, slots=True)
class Breakdown:
    """Where the conclusion ``β ≷ threshold`` breaks."""

    threshold: float
    scale: float | None
    direct_lower: tuple[float | None, ...]
    direct_upper: tuple[float | None, ...]
    conclusion: str
    bias_aware_scale: float | None = None   # the same for the bias-aware interval
    direct_units: DirectUnits | None = None  # the breakdown as direct effects (three units)
    bias_aware_units: DirectUnits | None = None

    def to_dict(self) -> dict:
        return {"threshold": self.threshold, "scale": json_number(self.scale),
                "direct_lower": [json_number(v) for v in self.direct_lower],
                "direct_upper": [json_number(v) for v in self.direct_upper],
                "conclusion": self.conclusion,
                "bias_aware_scale": json_number(self.bias_aware_scale),
                "direct_units": _units_dict(self.direct_units),
                "bias_aware_direct_units": _units_dict(self.bias_aware_units)}


def _units_dict(units: DirectUnits | None) -> dict | None:
    return units.to_dict() if units is not None else None


@dataclass(frozen=True, slots=True)
class Curve:
    """Union interval, identified set and bias-aware interval for scalings ``t`` of Γ."""

    scale: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    id_lower: np.ndarray
    id_upper: np.ndarray
    ba_lower: np.ndarray | None = None
    ba_upper: np.ndarray | None = None

    def to_list(self) -> list[dict]:
        rows = [{"scale": float(t), "lower": json_number(lo), "upper": json_number(hi),
                 "id_lower": json_number(il), "id_upper": json_number(iu)}
                for t, lo, hi, il, iu in zip(self.scale, self.lower, self.upper, self.id_lower,
                                              self.id_upper)]
        if self.ba_lower is not None and self.ba_upper is not None:
            for row, bl, bu in zip(rows, self.ba_lower, self.ba_upper):
                row.update(ba_lower=json_number(bl), ba_upper=json_number(bu))
        return rows


@dataclass(frozen=True, slots=True)
class SweepResult(Presentable):
    """Direct-effect sensitivity of the focus coefficient over a set Γ and its scalings."""

    focus: str
    outcome: str
    instruments: tuple[str, ...]
    n: int
    se_type: str
    confidence_level: float
    estimate: float
    se: float
    direct_set: tuple[Interval, ...]
    direct_set_rf: tuple[Interval, ...]
    direct_set_sd: tuple[Interval, ...]
    range_text: tuple[str, ...]
    polytope: bool
    identified_set: Interval
    union_ci: Interval
    union_ci_wald: Interval
    breakdown: Breakdown
    curve: Curve
    ar_set: tuple[Interval, ...] | None
    ar_method: str | None
    scale: Scale
    fit: iv.IVFit
    notes: tuple[str, ...] = field(default=())
    frontier: Frontier | None = None
    curve_extended: Curve | None = None
    adaptive: AdaptiveResult | None = None  # with ``adaptive=True``
    bias_aware: BiasAware | None = None
    union_method: UnionMethod | None = None
    at: tuple[AtPoint, ...] = ()            # intervals at the --at grid of direct effects
    bias_aware_optimal: OptimalBiasAware | None = None   # overidentified models
    direct_polytope: DirectSet | None = None   # the set Γ itself, for a polytope sweep

    def assumptions(self) -> list[str]:
        ranges = ", ".join(f"{z} in {r}" for z, r in zip(self.instruments, self.direct_set))
        shape = "a polytope with bounding box" if self.polytope else "a box"
        return [
            f"direct effect of each instrument on {self.outcome} (holding the treatment "
            f"fixed) lies in {shape}: {ranges} (outcome units)",
            "apart from that direct effect, the instruments are as good as randomly assigned "
            "given the controls",
            "linear model with a constant treatment effect",
            f"{self.se_type} covariance at every direct effect; union of "
            f"{100 * self.confidence_level:g}% intervals covers β at least at that rate when "
            "the true direct effect lies in the set",
            *(self.bias_aware.assumptions() if self.bias_aware is not None else []),
            *(self.bias_aware_optimal.assumptions() if self.bias_aware_optimal else []),
        ] + filter_assumptions(self.fit.where, self.fit.n_filtered) + (
            iv.absorb_assumptions(self.fit))

    def to_dict(self) -> dict:
        return iv.absorb_keys(self.fit) | {
            "focus": self.focus,
            "estimate": self.estimate,
            "se": self.se,
            "n": self.n,
            "n_dropped": self.fit.n_dropped,
            "n_filtered": self.fit.n_filtered,
            "se_type": self.se_type,
            "confidence_level": self.confidence_level,
            "direct_set": [i.to_list() for i in self.direct_set],
            "direct_set_rf": [i.to_list() for i in self.direct_set_rf],
            "direct_set_sd": [i.to_list() for i in self.direct_set_sd],
            "direct_ranges": list(self.range_text),
            "polytope": self.polytope,
            "identified_set": self.identified_set.to_list(),
            "union_ci": self.union_ci.to_list(),
            "union_ci_wald": self.union_ci_wald.to_list(),
            "union_method": (self.union_method.to_dict()
                             if self.union_method is not None else None),
            "bias_aware": self.bias_aware.to_dict() if self.bias_aware is not None else None,
            "bias_aware_optimal": (self.bias_aware_optimal.to_dict()
                                   if self.bias_aware_optimal is not None else None),
            "breakdown": self.breakdown.to_dict(),
            "at": [p.to_dict() for p in self.at],
            "curve": self.curve.to_list(),
            "frontier": self.frontier.to_list() if self.frontier is not None else None,
            "curve_extended": (self.curve_extended.to_list()
                               if self.curve_extended is not None else None),
            **(self._adaptive_keys()),
            "ar_set": intervals_to_lists(self.ar_set) if self.ar_set is not None else None,
            "ar_method": self.ar_method,
            "scale": {"reduced_form": dict(zip(self.instruments,
                                               map(float, self.scale.reduced_form))),
                      "outcome_sd": self.scale.outcome_sd,
                      "instrument_sd": dict(zip(self.instruments,
                                                map(float, self.scale.instrument_sd)))},
            "overid": self.fit.overid.to_dict() if self.fit.overid else None,
            "first_stage_f": {fs.treatment: json_number(fs.f) for fs in self.fit.first_stages},
            "notes": list(self.notes),
            "assumptions": self.assumptions(),
            "caution": CAUTION,
        }

    def _adaptive_keys(self) -> dict:
        if self.adaptive is None:
            return {}
        document = self.adaptive.to_dict()
        return {"adaptive_set": document["adaptive_set"],
                "min_relaxation": document["min_relaxation"], "adaptive": document}

    def __str__(self) -> str:
        return describe(self)


# ============================================================================ the sweep
def sweep(data, spec=None, *, direct: Sequence[RangeSpec | str] | None = None,
          polytope: str | None = None, se: str | None = None, confidence_level: float = 0.95,
          small: bool = False, threshold: float = 0.0, points: int = DEFAULT_POINTS,
          focus: str | None = None, adaptive: bool = False,
          chunk_rows: int | None = None, at=None) -> SweepResult:
    """Direct-effect sensitivity analysis from data (two passes over the rows, then closed forms).

    Parameters
    ----------
    data : sensiv.data source, DataFrame or path
    spec : sensiv.data.Spec, optional
    direct : sequence of RangeSpec or str
        One range per instrument, e.g. ``"-0.01:0.01"``, ``"-0.2:0.2rf"``, ``"-0.1:0.1sd"``.
    polytope : path, optional
        CSV polytope (instead of ``direct``).
    threshold : float
        The conclusion examined is ``β > threshold`` (or ``<``, whichever the data support).
    points : int
        Curve points over scalings ``t ∈ [0, 1]`` of the set.
    adaptive : bool
        Add the falsification adaptive set of Masten & Poirier (2021) (one treatment; with one
        instrument it is the 2SLS point).
    at : str or sequence, optional
        Direct effects ``v`` (e.g. ``"0.005,0.01"`` or ``[0.005, "0.1rf"]``) at which to report
        the intervals over the box ``±v`` for every instrument
        (:mod:`sensiv.sensitivity.at_points`).

    Returns
    -------
    SweepResult
    """
    if (direct is None) == (polytope is None):
        raise InputError("give either one --direct range per instrument or --direct-polytope "
                         "FILE (not both, not neither)")
    if isinstance(direct, (str, RangeSpec)):
        direct = [direct]  # one range, not its characters
    ranges = [parse_range(r) if isinstance(r, str) else r for r in (direct or [])]
    grid = parse_at(at)
    check_count(points, "--points", 2, MAX_POINTS, "curve points")
    if not math.isfinite(threshold):
        raise InputError("--threshold must be a finite number")
    source = iv.as_source(data, spec, chunk_rows=chunk_rows)
    se = se or iv.default_se(source.spec)
    treatments = source.layout.treatments
    j = focus_index(treatments, focus)
    if ranges:
        check_range_count(len(ranges), source.layout.instruments)
    dset_file = read_polytope(polytope, source.layout.instruments) if polytope else None
    if adaptive and len(treatments) != 1:
        raise InputError(f"--adaptive needs one treatment; got {len(treatments)} "
                         f"({', '.join(treatments)}): drop --adaptive or keep one treatment")
    result, pieces, sums = iv.fit_with_pieces(
        source, se=se, confidence_level=confidence_level, small=small,
        extra_blocks=lambda p: [] if se == "classic" else [focus_block(p, j),
                                                           *moment_block(p, se)])
    with overflow_guard("the --direct range (or polytope)"):
        return analyse(result, pieces, sums, j, ranges=ranges, dset=dset_file,
                       threshold=threshold, points=points, adaptive=adaptive, at=grid)


@remembering_se()
def analyse(result: iv.IVFit, pieces: iv.Pieces, sums: ScoreSums | None, j: int, *,
            ranges: Sequence[RangeSpec] = (), dset: DirectSet | None = None,
            threshold: float = 0.0, points: int = DEFAULT_POINTS,
            adaptive: bool = False, at: Sequence[AtValue] = ()) -> SweepResult:
    """The sweep from a fit's pieces (no further pass over the rows)."""
    core = build_core(pieces, sums, result, j)
    scale = scale_of_pieces(pieces)
    if dset is None:
        dset = resolve_ranges(ranges, scale)
    scales = np.linspace(0.0, 1.0, points)
    lo, hi, method = union_curve_set(core, dset, scales)
    id_lo, id_hi = identified_curve_set(core, dset, scales)
    if dset.box is None:
        ident = identified_set_lp(core, dset)
    else:
        ident = Interval(float(id_lo[-1]), float(id_hi[-1]))
    wald = Interval(float(lo[-1]), float(hi[-1]))
    notes = list(result.notes)
    union = wald
    uninformative = first_stage_is_uninformative(result, j)
    if uninformative:
        union = Interval(-math.inf, math.inf)
        lo, hi = np.full_like(lo, -np.inf), np.full_like(hi, np.inf)
        message = (f"the first stage of '{core.focus}' is not significant at the "
                   f"{100 * result.confidence_level:g}% level, so the data cannot rule out that "
                   "the instrument does not move the treatment: the union interval is "
                   "unbounded (the finite Wald arithmetic is in union_ci_wald)")
        notes.append(message)
        warnings.warn(message, WeakInstrumentWarning, stacklevel=2)
    level = result.confidence_level
    breakdown, extended, frontier = _breakdown_part(core, dset, threshold, wald,
                                                    uninformative, points, level)
    breakdown = with_units(breakdown, dset.bounding_box, scale.reduced_form,
                           scale.outcome_sd, scale.instrument_sd, core.instruments)
    ba = bias_aware([core], dset, level, unbounded=uninformative)
    ba_lo, ba_hi = bias_aware_curve([core], dset, scales, level, unbounded=uninformative)
    optimal = optimal_from_fit(pieces, sums, result, j, core, dset, ba, unbounded=uninformative)
    ar, ar_method, fas = None, None, None
    if len(pieces.design.treatments) == 1:
        rf = reduced_form(pieces, sums, result)
        ar, ar_method = robust_set(rf, dset)
        if adaptive:
            fas = adaptive_set(rf, instruments=core.instruments, scale=scale,
                               confidence_level=result.confidence_level)
        if not uninformative and differs_materially(ar, wald):
            message = ("the weak-instrument-robust (Anderson-Rubin) sensitivity set differs "
                       "materially from the union of Wald intervals, a sign of a weak first "
                       "stage (or of overidentifying restrictions that the data reject); "
                       "prefer the robust set")
            notes.append(message)
            warnings.warn(message, WeakInstrumentWarning, stacklevel=2)
    return SweepResult(
        focus=core.focus, outcome=pieces.design.outcome, instruments=core.instruments,
        n=result.n, se_type=result.se_type, confidence_level=result.confidence_level,
        estimate=core.estimate, se=core.se, direct_set=dset.bounding_box,
        direct_set_rf=set_in_units(dset, scale, "rf"),
        direct_set_sd=set_in_units(dset, scale, "sd"),
        range_text=tuple(r.text() for r in ranges), polytope=dset.box is None,
        identified_set=ident, union_ci=union, union_ci_wald=wald, breakdown=breakdown,
        curve=Curve(scales, lo, hi, id_lo, id_hi, ba_lo, ba_hi), ar_set=ar,
        ar_method=ar_method, scale=scale, fit=result, notes=tuple(dict.fromkeys(notes)),
        frontier=frontier, curve_extended=extended, adaptive=fas, bias_aware=ba,
        union_method=method, bias_aware_optimal=optimal,
        at=at_points(core, scale, at, level, uninformative),
        direct_polytope=dset if dset.box is None else None)


def with_units(breakdown: Breakdown, box, reduced_form, outcome_sd, instrument_sd,
               instruments) -> Breakdown:
    """``breakdown`` with its scales as direct effects in three units (``direct_units``)."""
    def units(t):
        return direct_units(t, instruments, box, reduced_form, outcome_sd, instrument_sd)
    return replace(breakdown, direct_units=units(breakdown.scale),
                   bias_aware_units=units(breakdown.bias_aware_scale))


def conclusion_text(focus: str, base: Interval, threshold: float, uninformative: bool) -> str:
    """The conclusion the data support at zero direct effect (``base``), in words."""
    if uninformative or base.contains(threshold):
        return f"none: at zero direct effect the interval already contains {threshold:g}"
    return f"{focus} effect {'>' if base.low > threshold else '<'} {threshold:g}"


def _breakdown_part(core: Core, dset: DirectSet, threshold: float, wald: Interval,
                    uninformative: bool, points: int, level: float
                    ) -> tuple[Breakdown, Curve | None, Frontier]:
    """Breakdown of the conclusion at ``threshold`` (union and bias-aware), the curve run on
    past a breakdown beyond the stated set, and the frontier over thresholds."""
    lower, upper = direct_breakdown(core, threshold)
    t_star = 0.0 if uninformative else breakdown_scale_set(core, dset, threshold)
    grid = np.linspace(0.0, 1.0, points)
    t_ba = 0.0 if uninformative else bias_aware_scale([core], dset, threshold,
                                                      level, grid)
    base = core.interval(np.zeros(len(core.instruments)))
    extended = None
    if t_star is not None and t_star > 1.0:
        extended = _curve(core, dset,
                          np.linspace(0.0, min(EXTEND_FACTOR * t_star, SCALE_MAX), points),
                          uninformative, level)
    frontier = breakdown_frontier(core, dset, frontier_thresholds(wald, threshold, base),
                                  uninformative=uninformative)
    conclusion = conclusion_text(core.focus, base, threshold, uninformative)
    breakdown = Breakdown(threshold, t_star, tuple(lower), tuple(upper), conclusion, t_ba)
    return breakdown, extended, frontier


def _curve(core: Core, dset: DirectSet, scales: np.ndarray, uninformative: bool,
           level: float) -> Curve:
    """Union interval, identified set and bias-aware interval over ``scales`` (union and
    bias-aware interval unbounded when ``uninformative``)."""
    lo, hi, _ = union_curve_set(core, dset, scales)
    if uninformative:
        lo, hi = np.full_like(lo, -np.inf), np.full_like(hi, np.inf)
    id_lo, id_hi = identified_curve_set(core, dset, scales)
    ba_lo, ba_hi = bias_aware_curve([core], dset, scales, level, unbounded=uninformative)
    return Curve(scales, lo, hi, id_lo, id_hi, ba_lo, ba_hi)
