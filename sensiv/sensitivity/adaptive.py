r"""The falsification adaptive set (Masten & Poirier 2021) for one treatment, several instruments.

With more instruments than treatments the exclusion restrictions can be *falsified*: the
single-instrument estimates disagree.  Rather than drop the model, relax every restriction
just enough for the model to fit, and report the effects that the least relaxed models allow.

Model (controls partialled out, one treatment ``x``, instruments ``z_1..z_K``)

.. math::

    y = βx + \sum_k γ_k z_k + u, \qquad x = \sum_k π_k z_k + v, \qquad
    \mathrm{E}[z u] = 0,

so the reduced form is ``ρ = βπ + γ`` (joint coefficients, each instrument's coefficient given
the others).  The exclusion restriction is ``γ = 0``.

**Relaxation used here.**  For a vector ``δ ≥ 0``, ``|γ_k| ≤ δ_k c_k`` with either

* ``units="effect"`` (default): ``c_k = |π_k|``.  Then ``δ_k`` bounds the bias
  ``γ_k / π_k`` of instrument ``k``'s own estimand ``β_k = ρ_k / π_k``: it is measured in
  units of the effect (outcome per unit of treatment), does not change when an instrument is
  rescaled, and reads as "every single-instrument estimate is off by at most δ";
* ``units="sd"``: ``c_k = SD(y) / SD(z_k)``, so ``δ_k`` is in outcome SDs per instrument SD,
  the ``sd`` suffix of ``sensiv sweep --direct``.

**Identified set.**  ``β`` is consistent with ``δ`` when ``γ = ρ − βπ`` satisfies the
relaxation:

.. math::

    B(δ) = \{β : |ρ_k - βπ_k| \le δ_k c_k\ \forall k\}
         = \bigcap_k [β_k - δ_k h_k,\ β_k + δ_k h_k], \qquad h_k = c_k / |π_k|.

**Falsification frontier and adaptive set** (Masten & Poirier 2021, from memory): the frontier
``FF`` is the set of relaxations ``δ`` with ``B(δ) ≠ ∅`` such that ``B(δ') = ∅`` for every
``δ' ≤ δ, δ' ≠ δ``; the falsification adaptive set is ``FAS = ∪_{δ ∈ FF} B(δ)``.  In this
model it has a closed form, for any positive scales ``c``:

.. math::

    \mathrm{FAS} = [\min_k β_k,\ \max_k β_k].

Proof: for ``δ ∈ FF`` and ``β ∈ B(δ)``, ``δ'_k = |β − β_k| / h_k ≤ δ_k`` also admits ``β``,
so minimality gives ``δ = δ'`` and ``B(δ) = {β}``.  Such a ``δ(β)`` is minimal exactly when no
``β'`` is at least as close to every ``β_k`` — i.e. when ``β`` lies between the smallest and the
largest ``β_k`` (beyond the largest, moving towards it shrinks every distance).  Hence the
FAS is the hull of the single-instrument estimands; it contains ``β`` whenever at least one
instrument is valid (then ``β_k = β`` for that ``k``).

**Smallest common relaxation** (``min_relaxation``): the frontier point on the diagonal,

.. math::

    δ^* = \min\{t : B(t\mathbf 1) \ne ∅\} = \max_{i,j} \frac{β_i - β_j}{h_i + h_j}

(one-dimensional intervals meet exactly when they meet pairwise), which is
``(max β_k − min β_k) / 2`` in effect units.  It is ``0`` only when the instruments agree
exactly (always with one instrument), so in a sample with several instruments ``δ* > 0``
essentially always.  ``B(δ*·1)`` is a single point (the lower ends ``β_k − t h_k`` fall and the
upper ends rise strictly with ``t``, so they first meet in one point), and it lies inside the
FAS.

Computation: ``δ*``, the frontier points where one instrument is held exactly valid (which
give the FAS's ends) and ``B(δ)`` are linear programmes, compiled once with cvxpy Parameters
and solved with HiGHS (:mod:`sensiv.sensitivity.adaptive_programmes`); the closed forms above
are checked against them.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field, replace

import numpy as np

from sensiv.core.errors import InaccurateSolveWarning, InputError
from sensiv.core.results import Interval, Presentable, describe, format_number, json_number
from sensiv.estimation import distributions as dist
from sensiv.estimation import iv
from sensiv.sensitivity.adaptive_programmes import (UNITS, Units, check_reduced_form,
                                                    closed_form, programmes, scaled_problem,
                                                    solve_range, solve_relax)
from sensiv.sensitivity.direct_sets import Scale, scale_from_moments
from sensiv.sensitivity.robust_set import ReducedForm, reduced_form

# Relative disagreement between a programme and its closed form above which a warning is given.
CHECK_TOL = 1e-6
METHOD = "linear programmes (cvxpy, HiGHS), checked against the closed form"
CAUTION = ("Caution: the falsification adaptive set holds only under the stated relaxation of "
           "the exclusion restrictions in a linear model with a constant effect; it contains "
           "the effect when at least one instrument is valid, but it does not prove any "
           "instrument valid, and it reflects no sampling uncertainty.")


# ============================================================================ results
@dataclass(frozen=True, slots=True)
class SingleInstrument:
    """One instrument's own estimand ``β_k = ρ_k / π_k`` (the other instruments as controls).

    ``relaxation_if_valid`` is the smallest common relaxation of the *other* instruments that
    is needed when this one is exactly valid (the frontier point with ``δ_k = 0``).
    """

    instrument: str
    estimate: float
    se: float
    first_stage: float
    first_stage_se: float
    relaxation_if_valid: float

    def to_dict(self) -> dict:
        return {"instrument": self.instrument, "estimate": json_number(self.estimate),
                "se": json_number(self.se), "first_stage": json_number(self.first_stage),
                "first_stage_se": json_number(self.first_stage_se),
                "relaxation_if_valid": json_number(self.relaxation_if_valid)}


@dataclass(frozen=True, slots=True)
class AdaptiveResult(Presentable):
    """Falsification adaptive set and the smallest relaxation that reconciles the instruments.

    Attributes
    ----------
    adaptive_set : Interval
        ``[min_k β_k, max_k β_k]`` (a point with one instrument).
    min_relaxation : float
        ``δ*`` in :attr:`units` (0 when the instruments agree exactly).
    least_relaxed_point : float
        The single point of ``B(δ*·1)``.
    confidence_set : Interval or None
        Bonferroni outer set ``[min_k (β̂_k − z se_k), max_k (β̂_k + z se_k)]`` with
        ``z = Φ⁻¹(1 − α/(2K))``; it covers the FAS with probability at least the level when
        every single-instrument Wald interval is valid; unbounded when some instrument's own
        first stage is not significant at that level.  ``None`` when no level was given.
    """

    adaptive_set: Interval
    min_relaxation: float
    least_relaxed_point: float
    units: str
    instruments: tuple[str, ...]
    singles: tuple[SingleInstrument, ...]
    confidence_set: Interval | None
    confidence_level: float | None
    method: str = METHOD
    notes: tuple[str, ...] = field(default=())

    @property
    def relaxation(self) -> str:
        """The relaxation in words."""
        if self.units == "effect":
            return ("|γ_k| ≤ δ·|π_k| for every instrument k: each single-instrument estimate "
                    "is biased by at most δ (units of the effect)")
        return ("|γ_k| ≤ δ·SD(y)/SD(z_k) for every instrument k: each direct effect is at "
                "most δ outcome SDs per instrument SD")

    def assumptions(self) -> list[str]:
        return [
            "linear model with a constant effect of one treatment; instruments as good as "
            "randomly assigned given the controls apart from their direct effects γ",
            "relaxation of the exclusion restrictions: " + self.relaxation,
            "falsification adaptive set = union of the identified sets over the falsification "
            "frontier (the least relaxations under which the model fits); it equals the range "
            "of the single-instrument estimates (each with the other instruments as controls)",
            "no sampling uncertainty in the adaptive set itself; see confidence_set",
        ]

    def to_dict(self) -> dict:
        return {
            "adaptive_set": self.adaptive_set.to_list(),
            "min_relaxation": json_number(self.min_relaxation),
            "relaxation_units": self.units,
            "relaxation": self.relaxation,
            "least_relaxed_point": json_number(self.least_relaxed_point),
            "single_instrument": [s.to_dict() for s in self.singles],
            "confidence_set": (self.confidence_set.to_list()
                               if self.confidence_set is not None else None),
            "confidence_level": self.confidence_level,
            "method": self.method,
            "notes": list(self.notes),
            "assumptions": self.assumptions(),
            "caution": CAUTION,
        }

    def __str__(self) -> str:
        return describe(self)


# ============================================================================ public API
def relaxed_set(rf: ReducedForm, relaxation: float, *, units: Units = "effect",
                scale: Scale | None = None) -> Interval | None:
    """Identified set ``B(δ·1)`` at a common relaxation ``δ`` by linear programming.

    Returns ``None`` when the set is empty, i.e. when ``δ < δ*`` (the relaxed model is still
    falsified).
    """
    if not (isinstance(relaxation, (int, float)) and math.isfinite(relaxation)
            and relaxation >= 0):
        raise InputError(f"relaxation {relaxation!r} must be a finite number ≥ 0")
    _, c = check_reduced_form(rf, units, scale, None)
    sc = scaled_problem(rf, c)
    progs = programmes(len(c))
    progs.a.value, progs.g.value = sc.a, sc.g
    ends = solve_range(progs, relaxation / sc.m)
    if ends is None:
        return None
    return Interval(sc.beta(ends[0]), sc.beta(ends[1]))


def adaptive_set(rf: ReducedForm, *, instruments=None, units: Units = "effect",
                 scale: Scale | None = None,
                 confidence_level: float | None = None) -> AdaptiveResult:
    """Falsification adaptive set and smallest common relaxation from a reduced form.

    Parameters
    ----------
    rf : sensiv.sensitivity.robust_set.ReducedForm
        ``rho`` and ``pi`` (one treatment) with their joint covariance, e.g.
        ``robust_set.reduced_form(pieces, sums, result)``.
    instruments : sequence of str, optional
        Names for the output (default: ``scale.instruments`` or ``z1..zK``).
    units : {"effect", "sd"}
        Scale of the relaxation (module docstring); ``"sd"`` needs ``scale``.
    scale : sensiv.sensitivity.direct_sets.Scale, optional
    confidence_level : float, optional
        Adds the Bonferroni outer confidence set of :class:`AdaptiveResult`.

    Returns
    -------
    AdaptiveResult

    Examples
    --------
    >>> from sensiv.sensitivity.robust_set import ReducedForm
    >>> rf = ReducedForm(np.array([1.0, 3.0]), np.array([1.0, 1.0]), np.eye(2),
    ...                  np.zeros((2, 2)), np.eye(2) * 0.01, 5.99)
    >>> res = adaptive_set(rf)
    >>> res.adaptive_set.to_list(), round(res.min_relaxation, 9)
    ([1.0, 3.0], 1.0)
    """
    names, c = check_reduced_form(rf, units, scale, instruments)
    if confidence_level is not None and not 0.0 < confidence_level < 1.0:
        raise InputError(f"confidence level {confidence_level} is outside (0, 1)")
    k = len(c)
    sc = scaled_problem(rf, c)
    progs = programmes(k)
    progs.a.value, progs.g.value = sc.a, sc.g

    d_star, b_star = solve_relax(progs, np.ones(k))  # b_star: the one point of B(δ*·1)
    frontier = []
    for j in range(k):
        w = np.ones(k)
        w[j] = 0.0
        d_j, b_j = solve_relax(progs, w)
        frontier.append((sc.beta(b_j), sc.m * d_j))
    ends = [b for b, _ in frontier]
    fas = Interval(min(ends), max(ends))
    delta = sc.m * d_star

    notes = []
    cf_fas, cf_delta = closed_form(rf, units=units, scale=scale)
    tol = CHECK_TOL * (sc.s + abs(cf_fas.low) + abs(cf_fas.high))
    if (abs(fas.low - cf_fas.low) > tol or abs(fas.high - cf_fas.high) > tol
            or abs(delta - cf_delta) > CHECK_TOL * (sc.m + cf_delta)):
        message = (f"the programmes and the closed form disagree: adaptive set {fas} vs "
                   f"{cf_fas}, smallest relaxation {delta:.10g} vs {cf_delta:.10g}")
        notes.append(message)
        warnings.warn(message, InaccurateSolveWarning, stacklevel=2)
    singles, conf, weak_note = single_instruments(rf, names, [r for _, r in frontier],
                                                  confidence_level)
    if weak_note is not None:
        notes.append(weak_note)
    if k == 1:
        notes.append("one instrument: nothing can be falsified, so the adaptive set is the "
                     "2SLS point and the smallest relaxation is 0")
    return AdaptiveResult(
        adaptive_set=fas, min_relaxation=delta,
        least_relaxed_point=sc.beta(b_star), units=units,
        instruments=names, singles=singles, confidence_set=conf,
        confidence_level=confidence_level, notes=tuple(notes))


def single_instruments(rf: ReducedForm, names: tuple[str, ...], relaxations: list[float],
                       confidence_level: float | None
                       ) -> tuple[tuple[SingleInstrument, ...], Interval | None, str | None]:
    r"""Each instrument's own estimand with its delta-method se, and the Bonferroni outer set.

    ``relaxations[k]`` is the frontier relaxation with instrument ``k`` held exactly valid.  The
    outer set is ``[min_k (β̂_k − z se_k), max_k (β̂_k + z se_k)]`` with
    ``z = Φ⁻¹(1 − α/(2K))`` (``None`` without a level).  The third element is a note saying
    why the set is unbounded when some own first stage is not significant (else ``None``).
    """
    k = len(names)
    rho, pi = np.asarray(rf.rho, float), np.asarray(rf.pi, float)
    single = rho / pi
    var = (np.diag(rf.v_rr) - 2.0 * single * np.diag(rf.v_rp)
           + single**2 * np.diag(rf.v_pp)) / pi**2
    se = np.sqrt(np.maximum(var, 0.0))
    pi_se = np.sqrt(np.maximum(np.diag(rf.v_pp), 0.0))
    singles = tuple(SingleInstrument(n, float(single[j]), float(se[j]), float(pi[j]),
                                     float(pi_se[j]), relaxations[j])
                    for j, n in enumerate(names))
    conf, note = None, None
    if confidence_level is not None:
        z = dist.normal_quantile(1.0 - (1.0 - confidence_level) / (2.0 * k))
        weak = [n for n, p, ps in zip(names, pi, pi_se) if not abs(p) > z * ps]
        if weak:
            conf = Interval(-math.inf, math.inf)
            note = (f"the own first stage of {', '.join(weak)} (given the other instruments) is "
                    f"not significant at the Bonferroni level, so its single-instrument estimate "
                    "is unreliable and the confidence set for the adaptive set is unbounded")
        else:
            conf = Interval(float(np.min(single - z * se)), float(np.max(single + z * se)))
    return singles, conf, note


def adaptive_from_data(data, spec=None, *, units: Units = "effect", se: str | None = None,
                       confidence_level: float = 0.95, small: bool = False,
                       chunk_rows: int | None = None) -> AdaptiveResult:
    """The falsification adaptive set from data (two passes over the rows, then programmes).

    Parameters
    ----------
    data : sensiv.data source, DataFrame or path
    spec : sensiv.data.Spec, optional
        One treatment, any number of instruments.

    Returns
    -------
    AdaptiveResult
    """
    source = iv.as_source(data, spec, chunk_rows=chunk_rows)
    treatments = source.layout.treatments
    if len(treatments) != 1:
        raise InputError(f"the falsification adaptive set is computed for one treatment; got "
                         f"{len(treatments)} ({', '.join(treatments)}): keep one treatment")
    if units not in UNITS:
        raise InputError(f"units '{units}' is not a relaxation unit; choose one of "
                         f"{', '.join(UNITS)}")
    result, pieces, sums = iv.fit_with_pieces(
        source, se=se or iv.default_se(source.spec), confidence_level=confidence_level,
        small=small)
    rf = reduced_form(pieces, sums, result)
    scale = scale_from_moments(pieces.moments, pieces.design.outcome,
                               pieces.design.instruments, rf.rho)
    out = adaptive_set(rf, instruments=pieces.design.instruments, units=units, scale=scale,
                       confidence_level=confidence_level)
    estimate = result.tsls.value(treatments[0])
    if len(rf.rho) > 1 and not out.adaptive_set.contains(estimate):
        out = replace(out, notes=out.notes + (
            f"the 2SLS estimate {format_number(estimate)} lies outside the adaptive set: with "
            "correlated instruments 2SLS can weight a single-instrument estimate negatively",))
    return out
