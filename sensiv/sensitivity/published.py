r"""Stress tests from a published table's numbers only (one treatment, one instrument).

A reader often has only what a paper prints: the IV estimate ``B`` with its standard error
``S``, the first stage ``P`` with its standard error ``SP`` (or its ``F``), sometimes the reduced
form ``R`` with its standard error ``SR``.  In the just-identified model the estimate under a
direct effect ``γ`` is ``β̂(γ) = B − γ/P``, with a delta-method variance quadratic in ``γ``: a
:class:`~sensiv.sensitivity.linear_core.Core` built from the covariance of reduced form and first
stage, backed out of the printed numbers or, when they do not allow it, the worst case over
every admissible covariance (:mod:`sensiv.sensitivity.published_covariance` derives both).

The unions, identified sets, breakdown points and Anderson–Rubin sets are those of the data
route (:mod:`sensiv.sensitivity.union`, :mod:`~sensiv.sensitivity.frontier`,
:mod:`~sensiv.sensitivity.robust_set`), reused unchanged; prior intervals are those of
:mod:`sensiv.sensitivity.prior`.  The printed numbers are validated and cross-checked in
:mod:`sensiv.sensitivity.published_inputs`.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np

from sensiv.core.errors import InputError, WeakInstrumentWarning
from sensiv.core.limits import MAX_POINTS, check_count, overflow_guard
from sensiv.core.results import Interval, Presentable, describe, intervals_to_lists, json_number
from sensiv.estimation import distributions as dist
from sensiv.sensitivity.bias_aware import (BiasAware, bias_aware, bias_aware_curve,
                                           bias_aware_scale)
from sensiv.sensitivity.bounds import (DEFAULT_POINTS, EXTEND_FACTOR, Breakdown, Curve,
                                       conclusion_text, differs_materially, with_units)
from sensiv.sensitivity.direct_sets import DirectSet, box_set
from sensiv.sensitivity.frontier import Frontier, frontier_thresholds
from sensiv.sensitivity.linear_core import Core
from sensiv.sensitivity.prior import normal_interval, quadrature_interval
from sensiv.sensitivity.prior_laws import Prior, law_text, parse_prior
from sensiv.sensitivity.published_covariance import (FOCUS, INSTRUMENT, METHOD_CLIPPED,
                                                     METHOD_WORST, Covariance, choose_covariance,
                                                     core_from, hull_breakdown, hull_curve,
                                                     hull_frontier)
from sensiv.sensitivity.published_inputs import (Reported, check_reported, consistency_notes,
                                                 one_value, resolve_range)
from sensiv.sensitivity.robust_set import ReducedForm, robust_set
from sensiv.sensitivity.union import SCALE_MAX, merge_intervals


class InconsistentInputWarning(UserWarning):
    """Reported numbers do not agree with each other beyond their printed rounding."""


CAUTION = ("Caution: these bounds are rebuilt from printed numbers only; they hold only under "
           "the assumed range of direct effects and the approximations stated (one sample and "
           "specification behind every printed number, a backed-out covariance), and they do "
           "not prove that the instrument is valid.")


# ============================================================================ results
@dataclass(frozen=True, slots=True)
class PriorPart:
    """Interval under a prior law of the direct effect (same keys as ``sensiv prior``)."""

    law: str
    interval: Interval
    center: float
    method: str
    mc_error: float | None

    def to_dict(self) -> dict:
        return {"interval": self.interval.to_list(), "center": json_number(self.center),
                "method": self.method, "mc_error": json_number(self.mc_error),
                "law": self.law}


@dataclass(frozen=True, slots=True)
class PublishedResult(Presentable):
    """Direct-effect sensitivity of a published IV estimate, from its printed numbers only.

    ``to_dict()`` carries the keys of ``sensiv sweep --json`` at top level (``estimate``,
    ``se``, ``direct_set``, ``identified_set``, ``union_ci``, ``breakdown``, ``curve``,
    ``ar_set``) and, when a prior is given, the keys of ``sensiv prior --json`` nested under
    ``prior`` (``null`` otherwise); plus ``approximation``, ``covariance``, ``reported``,
    ``assumptions``, ``caution`` and ``notes``.  As in a sweep, ``frontier`` holds the breakdown
    for a range of thresholds and ``curve_extended`` the curve run on to ``EXTEND_FACTOR``
    times a breakdown scale beyond 1 (``null`` otherwise); with the worst-case covariance both
    are the least favourable of the two extreme correlations, like the breakdown itself.
    """

    reported: Reported
    confidence_level: float
    estimate: float
    se: float
    first_stage_se: float
    first_stage_wald: float
    direct_set: Interval
    direct_set_rf: Interval | None
    range_text: str
    identified_set: Interval
    union_ci: Interval
    union_ci_wald: Interval
    breakdown: Breakdown
    curve: Curve
    ar_set: tuple[Interval, ...]
    ar_method: str
    covariance: Covariance
    prior: PriorPart | None
    notes: tuple[str, ...] = field(default=())
    frontier: Frontier | None = None
    curve_extended: Curve | None = None
    bias_aware: BiasAware | None = None

    @property
    def focus(self) -> str:
        """The name the effect goes by (published numbers carry no column names)."""
        return FOCUS

    @property
    def approximation(self) -> str:
        return (self.covariance.words + "; reduced form and first stage approximately jointly "
                "normal (delta method), large-sample normal and chi-square critical values")

    def assumptions(self) -> list[str]:
        out = [
            f"direct effect of the instrument on the outcome (holding the treatment fixed) "
            f"lies in {self.direct_set} (outcome units)",
            "one treatment, one instrument (just identified); apart from that direct effect, "
            "the instrument is as good as randomly assigned given the paper's controls",
            "linear model with a constant treatment effect",
            "the printed estimate, standard errors and first stage come from the same sample, "
            "specification and kind of covariance",
            self.approximation,
            *(self.bias_aware.assumptions() if self.bias_aware is not None else []),
        ]
        if self.prior is not None:
            out.append(f"for the prior interval: direct effect ~ {self.prior.law}, independent "
                       "of the sampling error; its variance is taken at zero direct effect "
                       "(local-to-zero), so it does not depend on the covariance choice")
        return out

    def to_dict(self) -> dict:
        return {
            "estimate": self.estimate,
            "se": self.se,
            "n": self.reported.n,
            "confidence_level": self.confidence_level,
            "first_stage": self.reported.first_stage,
            "first_stage_se": self.first_stage_se,
            "first_stage_wald": self.first_stage_wald,
            "reported": self.reported.to_dict(),
            "direct_set": [self.direct_set.to_list()],
            "direct_set_rf": [self.direct_set_rf.to_list()] if self.direct_set_rf else None,
            "direct_ranges": [self.range_text],
            "identified_set": self.identified_set.to_list(),
            "union_ci": self.union_ci.to_list(),
            "union_ci_wald": self.union_ci_wald.to_list(),
            "bias_aware": self.bias_aware.to_dict() if self.bias_aware is not None else None,
            "breakdown": self.breakdown.to_dict(),
            "curve": self.curve.to_list(),
            "frontier": self.frontier.to_list() if self.frontier is not None else None,
            "curve_extended": (self.curve_extended.to_list()
                               if self.curve_extended is not None else None),
            "ar_set": intervals_to_lists(self.ar_set),
            "ar_method": self.ar_method,
            "covariance": self.covariance.to_dict(),
            "prior": self.prior.to_dict() if self.prior is not None else None,
            "approximation": self.approximation,
            "notes": list(self.notes),
            "assumptions": self.assumptions(),
            "caution": CAUTION,
        }

    def __str__(self) -> str:
        return describe(self)


# ============================================================================ the analysis
def published_analysis(*, estimate: float, se: float, first_stage: float,
                       first_stage_se: float | None = None, first_stage_f: float | None = None,
                       reduced_form: float | None = None, reduced_form_se: float | None = None,
                       n: int | None = None, direct, prior=None, threshold: float = 0.0,
                       points: int = DEFAULT_POINTS,
                       confidence_level: float = 0.95) -> PublishedResult:
    """Direct-effect sensitivity of a published just-identified IV estimate.

    Parameters
    ----------
    estimate, se : float
        The printed IV estimate ``B`` and its standard error ``S``.
    first_stage : float
        The printed first-stage coefficient ``P`` of the instrument.
    first_stage_se, first_stage_f : float, optional
        Its standard error, or the first-stage F (then ``SP = |P|/√F``); at least one.
    reduced_form, reduced_form_se : float, optional
        The printed reduced-form coefficient and its standard error.  With ``reduced_form_se``
        the covariance of reduced form and first stage is backed out of ``se``; without it the
        worst case over admissible correlations is used.  ``reduced_form`` serves the
        consistency check and the ``rf`` unit; the analysis always uses ``ρ̂ = B·P``, so that
        at zero direct effect the interval is the printed ``B ± z·S``.
    n : int, optional
        Sample size (reported only).
    direct : str or RangeSpec (or a one-element sequence of them)
        Assumed range ``LOW:HIGH`` of the direct effect, in outcome units or with suffix ``rf``.
    prior : str or Prior (or a one-element sequence), optional
        ``normal:MEAN:SD`` (closed form), ``uniform:LOW:HIGH`` or ``triangular:LOW:MODE:HIGH``
        (quadrature).
    threshold : float
        The conclusion examined is ``β > threshold`` (or ``<``).
    points : int
        Curve points over scalings ``t ∈ [0, 1]`` of the range.
    confidence_level : float

    Returns
    -------
    PublishedResult

    Examples
    --------
    >>> res = published_analysis(estimate=0.75, se=0.25, first_stage=4.2, first_stage_se=0.6,
    ...                          direct="0:0")
    >>> [round(v, 4) for v in (res.union_ci.low, res.union_ci.high)]
    [0.26, 1.24]
    """
    rep = check_reported(estimate=estimate, se=se, first_stage=first_stage,
                         first_stage_se=first_stage_se, first_stage_f=first_stage_f,
                         reduced_form=reduced_form, reduced_form_se=reduced_form_se, n=n)
    if not 0.0 < confidence_level < 1.0:
        raise InputError(f"--level {confidence_level} is outside (0, 1); give a confidence "
                         "level such as 0.95")
    check_count(points, "--points", 2, MAX_POINTS, "curve points")
    if not math.isfinite(threshold):
        raise InputError("--threshold must be a finite number")
    direct = one_value(direct, "--direct range(s)")
    if direct is None:
        raise InputError("--direct LOW:HIGH is required: the assumed range of the direct effect")
    prior = one_value(prior, "--prior law(s)")
    gamma_set, gamma_rf, range_text = resolve_range(direct, rep)
    law = parse_prior(prior) if isinstance(prior, str) else prior
    if law is not None:
        law = PublishedLaw(law.in_outcome_units(_rf_factor(law, rep)), law)

    notes = consistency_notes(rep)
    for message in notes:
        warnings.warn(message, InconsistentInputWarning, stacklevel=2)
    with overflow_guard("a printed number"):
        sp = rep.first_stage_se or abs(rep.first_stage) / math.sqrt(rep.first_stage_f)
        cov, cov_notes = choose_covariance(rep, sp)
    notes += cov_notes
    if cov.method == METHOD_CLIPPED:
        for message in cov_notes:
            warnings.warn(message, InconsistentInputWarning, stacklevel=2)
    with overflow_guard("the --direct range or a printed number"):
        return _stress_test(rep, sp, cov, gamma_set, gamma_rf, range_text, law, notes,
                            threshold=threshold, points=points,
                            confidence_level=confidence_level)


def _stress_test(rep: Reported, sp: float, cov: Covariance, gamma_set: Interval,
                 gamma_rf: Interval | None, range_text: str, law: PublishedLaw | None,
                 notes: list[str], *, threshold: float, points: int,
                 confidence_level: float) -> PublishedResult:
    """The analysis proper, once the inputs are checked and the covariance chosen (its
    warnings are raised at the caller of :func:`published_analysis`)."""
    b, p = rep.estimate, rep.first_stage
    critical = dist.normal_quantile(0.5 + 0.5 * confidence_level)
    cores = [core_from(b, p, m, critical, cov.inflation, w)
             for m, w in zip(cov.matrices, cov.centred)]
    ar_critical = dist.chi2_quantile(confidence_level, 1)
    dset = box_set((INSTRUMENT,), [(gamma_set.low, gamma_set.high)])
    scales = np.linspace(0.0, 1.0, points)
    lo, hi, id_lo, id_hi = hull_curve(cores, dset.vertices, scales)
    wald = Interval(float(lo[-1]), float(hi[-1]))
    union = wald
    wald_stat = (p / sp) ** 2
    uninformative = not wald_stat > ar_critical
    if uninformative:
        union = Interval(-math.inf, math.inf)
        lo, hi = np.full_like(lo, -np.inf), np.full_like(hi, np.inf)
        message = (f"the first stage is not significant at the {100 * confidence_level:g}% "
                   f"level ((first stage/se)^2 = {wald_stat:.4g}), so the printed numbers "
                   "cannot rule out that the instrument does not move the treatment: the union "
                   "interval is unbounded (the finite Wald arithmetic is in union_ci_wald)")
        notes.append(message)
        warnings.warn(message, WeakInstrumentWarning, stacklevel=3)
    breakdown, extended, frontier = _breakdown_part(cores, dset, threshold, wald,
                                                    uninformative, points, confidence_level)
    rf = rep.reduced_form if rep.reduced_form is not None else b * p
    breakdown = with_units(breakdown, (gamma_set,), (rf,), None, None, (INSTRUMENT,))
    ba = bias_aware(cores, dset, confidence_level, unbounded=uninformative)
    ba_lo, ba_hi = bias_aware_curve(cores, dset, scales, confidence_level,
                                    unbounded=uninformative)
    ar, ar_method, message, weak = _robust_part(rep, sp, cov, ar_critical, dset, wald,
                                                uninformative)
    if message is not None:
        notes.append(message)
        if weak:
            warnings.warn(message, WeakInstrumentWarning, stacklevel=3)
    prior_part = None
    if law is not None:
        widest = max(cores, key=lambda c: c.quad[0, 0])
        prior_part = _prior_part(law, widest, confidence_level)
    return PublishedResult(
        reported=rep, confidence_level=confidence_level, estimate=b,
        se=max(c.se for c in cores), first_stage_se=sp, first_stage_wald=wald_stat,
        direct_set=gamma_set, direct_set_rf=gamma_rf, range_text=range_text,
        identified_set=Interval(float(id_lo[-1]), float(id_hi[-1])), union_ci=union,
        union_ci_wald=wald, breakdown=breakdown,
        curve=Curve(scales, lo, hi, id_lo, id_hi, ba_lo, ba_hi), ar_set=ar, ar_method=ar_method,
        covariance=cov, prior=prior_part, notes=tuple(dict.fromkeys(notes)), frontier=frontier,
        curve_extended=extended, bias_aware=ba)


def _breakdown_part(cores: list[Core], dset: DirectSet, threshold: float,
                    wald: Interval, uninformative: bool, points: int, level: float
                    ) -> tuple[Breakdown, Curve | None, Frontier]:
    """Breakdown at ``threshold`` (least favourable core; union and bias-aware), the curve run
    on past a breakdown beyond the assumed range, and the frontier over thresholds."""
    vertices = dset.vertices
    t_ba = 0.0 if uninformative else bias_aware_scale(cores, dset, threshold, level,
                                                      np.linspace(0.0, 1.0, points))
    t_star, direct_lower, direct_upper = hull_breakdown(cores, vertices, threshold,
                                                        uninformative)
    base = cores[0].interval(np.zeros(1))
    extended = None
    if t_star is not None and t_star > 1.0:
        wide = np.linspace(0.0, min(EXTEND_FACTOR * t_star, SCALE_MAX), points)
        extended = Curve(wide, *hull_curve(cores, vertices, wide),
                         *bias_aware_curve(cores, dset, wide, level, unbounded=uninformative))
    frontier = hull_frontier(cores, vertices, frontier_thresholds(wald, threshold, base),
                             uninformative)
    conclusion = conclusion_text(FOCUS, base, threshold, uninformative)
    breakdown = Breakdown(threshold, t_star, (direct_lower,), (direct_upper,), conclusion, t_ba)
    return breakdown, extended, frontier


def _robust_part(rep: Reported, sp: float, cov: Covariance, critical: float, dset: DirectSet,
                 wald: Interval, uninformative: bool
                 ) -> tuple[tuple[Interval, ...], str, str | None, bool]:
    """The weak-IV-robust set (the union over the covariances' exact Anderson–Rubin sets), its
    method, and a note on it with whether that note is a weak-instrument warning."""
    b, p = rep.estimate, rep.first_stage
    pieces = []  # in β₀ − B, from the reduced form of y − B·d (zero) and its covariances as
    for m, (w_rr, w_rp) in zip(cov.matrices, cov.centred):  # constructed: no cancellation
        form = ReducedForm(np.zeros(1), np.array([p]), np.array([[w_rr]]), np.array([[w_rp]]),
                           m[1:, 1:].copy(), critical)
        pieces.extend(Interval(i.low + b, i.high + b) for i in robust_set(form, dset)[0])
    ar = merge_intervals(pieces)
    method = ("exact" if len(cov.matrices) == 1 else
              "exact, union over the two extreme correlations")
    if cov.method == METHOD_WORST:
        # The AR variance at β₀ is Var(ρ̂ − β₀π̂), whose worst case grows with |β₀ − B|; a gap
        # to the Wald union then reflects the unknown covariance, not a weak first stage.
        return ar, method, ("the weak-instrument-robust set is a worst case too: it allows a "
                            "reduced-form se of up to "
                            f"{rep.se * abs(p) + abs(b) * sp:.4g} (se x |first stage| + "
                            "|estimate| x first-stage se); the printed reduced-form se and its "
                            "covariance with the first stage would narrow it"), False
    if not uninformative and differs_materially(ar, wald):
        return ar, method, ("the weak-instrument-robust (Anderson-Rubin) sensitivity set "
                            "differs materially from the union of Wald intervals, a sign of a "
                            "weak first stage; prefer the robust set"), True
    return ar, method, None, False


@dataclass(frozen=True, slots=True)
class PublishedLaw:
    """A prior law in outcome units, and the law as given (``rf``: a share of the printed
    reduced form)."""

    law: Prior
    given: Prior

    def text(self) -> str:
        return law_text(self.law, self.given)


def _rf_factor(law: Prior, rep) -> float:
    """The factor that turns a law's unit into outcome units from printed numbers only."""
    if law.unit == "sd":
        raise InputError(f"--prior '{law.text()}': the 'sd' unit needs the standard deviations "
                         "of the outcome and the instrument, which a published table does not "
                         "give; state the law in outcome units or as a share of the reduced "
                         "form ('rf')")
    if law.unit == "rf":
        return rep.reduced_form if rep.reduced_form is not None else rep.estimate * \
            rep.first_stage
    return 1.0


def _prior_part(given: PublishedLaw, core: Core, level: float) -> PriorPart:
    """The prior interval of a stress test: closed form for a normal law, quadrature else."""
    law = given.law
    if law.kind == "normal":
        interval, center = normal_interval(core, np.array([law.params[0]]),
                                           np.array([[law.params[1] ** 2]]))
        method = "closed-form"
    else:
        interval, center = quadrature_interval(core, law, level)
        method = "quadrature"
    return PriorPart(given.text(), interval, center, method, None)
