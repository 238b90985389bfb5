r"""Stress tests from a published table's numbers only (one treatment, one instrument).

A reader often has only what a paper prints: the IV estimate ``B`` with its standard error
``S``, the first-stage coefficient ``P = π̂`` with its standard error ``SP`` (or the first-stage
``F``, then ``SP = |P|/√F``), sometimes the reduced-form coefficient ``R = ρ̂`` with its standard
error ``SR``.  In the just-identified model the estimate under a direct effect ``γ`` of the
instrument on the outcome is

.. math::

    \hat β(γ) = \frac{\hat ρ - γ}{\hat π} = B - \frac{γ}{P},
    \qquad \hat ρ = B P,

and, with ``V = Cov(ρ̂, π̂) = [[v_ρρ, c], [c, v_ππ]]``, its delta-method variance is a quadratic
in ``γ``:

.. math::

    P^2 \operatorname{Var}\hat β(γ) = v_{ρρ} - 2\,\hat β(γ)\,c + \hat β(γ)^2 v_{ππ}
    = Q_{00} - 2γ Q_{01} + γ^2 Q_{11} \quad(\text{times } P^2),

    Q_{00} = \frac{v_{ρρ} - 2Bc + B^2 v_{ππ}}{P^2}, \quad
    Q_{01} = \frac{B v_{ππ} - c}{P^3}, \quad
    Q_{11} = \frac{v_{ππ}}{P^4},

which is exactly the :class:`sensiv.sensitivity.bounds.Core` form ``[1, −γ] Q [1, −γ]'`` with estimate ``B``
and slope ``1/P`` (``det Q = (v_ρρ v_ππ − c²)/P⁶ ≥ 0``).  In a just-identified 2SLS fit this is
not an approximation of the data-based variance: the 2SLS residual at ``γ`` is the reduced-form
residual minus ``β̂(γ)`` times the first-stage residual, so the classic, robust and cluster
sandwiches of ``β̂(γ)`` equal the delta-method variance built from the same kind of covariance
of ``(ρ̂, π̂)``.  The only unknown is ``c``, which papers seldom print:

* **backed out** when ``SR`` is printed: the delta method at ``γ = 0`` gives
  ``S²P² = SR² − 2Bc + B²SP²``, so ``c = (SR² + B²SP² − S²P²)/(2B)``.  If the implied
  correlation ``c/(SR·SP)`` falls outside ``[−1, 1]`` (rounding in the printed table) it is
  clipped, and if the clipped variance at ``γ = 0`` falls below ``S²`` the difference is added
  to ``Q₀₀`` so that no interval is narrower than the printed one;
* **worst case** otherwise (no ``SR``, or ``B = 0`` where ``c`` cannot be recovered): every
  ``c`` with ``|c − B·SP²| ≤ SP·S·|P|`` is consistent with the printed ``S`` (these are exactly
  the correlations in ``[−1, 1]``), and maximising over them gives

  .. math::

      \operatorname{se}_{\max}(γ) = S + |γ|\,\frac{SP}{P^2},

  the two ends being the perfectly correlated covariances.  Each end is a ``Core``; the
  worst-case interval at ``γ`` is the hull of the two, so the union over Γ is the hull of the
  two exact unions, the breakdown scale the smaller of the two, and the weak-IV-robust set the
  union of the two exact Anderson–Rubin sets (the AR variance ``v_ρρ − 2β₀c + β₀²v_ππ`` is also
  linear in ``c``, so its maximum over the admissible ``c`` sits at the same two ends).

The unions, identified sets, breakdown points and Anderson–Rubin sets are those of
:mod:`sensiv.sensitivity.bounds`, reused unchanged; prior intervals are those of :mod:`sensiv.sensitivity.prior`.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np

from sensiv.sensitivity import bounds
from sensiv.estimation import distributions as dist
from sensiv.sensitivity import prior as prior_layer
from sensiv.sensitivity.bounds import CAUTION, Breakdown, Core, Curve, Frontier, RangeSpec, ReducedForm
from sensiv.core.errors import InputError, WeakInstrumentWarning
from sensiv.core.results import Interval, describe, format_number, intervals_to_lists, json_number

FOCUS = "treatment"          # published numbers carry no column names
INSTRUMENT = "instrument"
# Relative slack for consistency checks of numbers given at full precision (floating point).
CONSISTENCY_FLOOR = 1e-9
# Below this |B|·SP relative to S·|P| the back-out c = (…)/(2B) has lost every digit.
BACKOUT_TOL = 1e-12

METHOD_BACKED_OUT = "backed-out"
METHOD_CLIPPED = "backed-out, clipped"
METHOD_WORST = "worst-case"


class InconsistentInputWarning(UserWarning):
    """Reported numbers do not agree with each other beyond their printed rounding."""


# ============================================================================ validated input
@dataclass(frozen=True, slots=True)
class Reported:
    """The printed numbers, validated (``None`` where the paper prints nothing)."""

    estimate: float
    se: float
    first_stage: float
    first_stage_se: float | None
    first_stage_f: float | None
    reduced_form: float | None
    reduced_form_se: float | None
    n: int | None

    def to_dict(self) -> dict:
        return {"estimate": self.estimate, "se": self.se, "first_stage": self.first_stage,
                "first_stage_se": self.first_stage_se, "first_stage_f": self.first_stage_f,
                "reduced_form": self.reduced_form, "reduced_form_se": self.reduced_form_se,
                "n": self.n}


def _number(flag: str, value, *, positive: bool = False, optional: bool = False) -> float | None:
    if value is None:
        if optional:
            return None
        raise InputError(f"{flag} is required; give the number printed in the table")
    if isinstance(value, bool):
        raise InputError(f"{flag} {value!r} is not a number; give the printed value")
    try:
        number = float(value)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{flag} {value!r} is not a number; give the printed value") from exc
    if not math.isfinite(number):
        raise InputError(f"{flag} {value!r} is not finite; give the printed (finite) value")
    if positive and not number > 0:
        raise InputError(f"{flag} {number:g} is not positive; a standard error or F statistic "
                         "must be > 0 (check the sign and the column you copied)")
    return number


def check_reported(*, estimate, se, first_stage, first_stage_se=None, first_stage_f=None,
                   reduced_form=None, reduced_form_se=None, n=None) -> Reported:
    """Validate the printed numbers (the caller's mistakes raise :class:`InputError`)."""
    b = _number("--estimate", estimate)
    s = _number("--se", se, positive=True)
    p = _number("--first-stage", first_stage)
    if p == 0.0:
        raise InputError("--first-stage 0: with a first stage of zero the instrument does not "
                         "move the treatment and the IV estimate is undefined; check the value")
    sp = _number("--first-stage-se", first_stage_se, positive=True, optional=True)
    f = _number("--first-stage-f", first_stage_f, positive=True, optional=True)
    if sp is None and f is None:
        raise InputError("the first stage needs its precision: give --first-stage-se or "
                         "--first-stage-f (then se = |first stage|/sqrt(F))")
    r = _number("--reduced-form", reduced_form, optional=True)
    sr = _number("--reduced-form-se", reduced_form_se, positive=True, optional=True)
    if n is not None:
        if isinstance(n, bool) or not float(n).is_integer():
            raise InputError(f"--n {n!r} is not a whole number; give the number of observations")
        n = int(n)
        if n <= 1:
            raise InputError(f"--n {n} is too small; a published estimate rests on at least 2 "
                             "observations (give the sample size printed in the table)")
    return Reported(b, s, p, sp, f, r, sr, n)


def printed_half_unit(value: float) -> float:
    """Half a unit in the last digit of ``value`` as printed (shortest decimal form).

    Tables round; the shortest decimal representation of a float recovers the printed digits,
    e.g. ``0.6`` → 0.05.  A trailing ``.0`` counts as no decimals (the conservative reading).

    Examples
    --------
    >>> printed_half_unit(0.6), printed_half_unit(212.0), printed_half_unit(1.25e-05)
    (0.05, 0.5, 5e-08)
    """
    text = repr(abs(float(value))).lower()
    mantissa, _, exponent = text.partition("e")
    decimals = len(mantissa.partition(".")[2].rstrip("0"))
    power = decimals - (int(exponent) if exponent else 0)
    return 0.5 * 10.0 ** (-power)


def _range_of(value: float, slack: float) -> tuple[float, float]:
    return value - slack, value + slack


def _ratio_range(num: float, den: float) -> tuple[float, float] | None:
    """Range of ``num/den`` over the printed rounding of both (None if ``den`` may be 0)."""
    n_lo, n_hi = _range_of(num, printed_half_unit(num))
    d_lo, d_hi = _range_of(den, printed_half_unit(den))
    if d_lo <= 0.0 <= d_hi:
        return None
    corners = [a / b for a in (n_lo, n_hi) for b in (d_lo, d_hi)]
    return min(corners), max(corners)


def _agree(value: float, other: tuple[float, float] | None) -> bool:
    if other is None:
        return True
    lo, hi = _range_of(value, printed_half_unit(value))
    slack = CONSISTENCY_FLOOR * max(abs(value), abs(other[0]), abs(other[1]))
    return hi >= other[0] - slack and lo <= other[1] + slack


def consistency_notes(rep: Reported) -> list[str]:
    """Disagreements between printed numbers beyond their rounding (warnings, not errors)."""
    notes = []
    if rep.first_stage_se is not None and rep.first_stage_f is not None:
        t = _ratio_range(rep.first_stage, rep.first_stage_se)
        squared = None
        if t is not None:
            lo, hi = sorted((t[0] ** 2, t[1] ** 2)) if t[0] * t[1] > 0 else (0.0, max(
                t[0] ** 2, t[1] ** 2))
            squared = (lo, hi)
        implied = (rep.first_stage / rep.first_stage_se) ** 2
        if not _agree(rep.first_stage_f, squared):
            notes.append(
                f"the reported first-stage F {rep.first_stage_f:g} does not match "
                f"(first stage / its se)^2 = ({rep.first_stage:g}/{rep.first_stage_se:g})^2 = "
                f"{implied:.4g}, even allowing for rounding; the F may use another covariance "
                "or more instruments. The analysis uses the first-stage se; check the table")
    if rep.reduced_form is not None:
        ratio = rep.reduced_form / rep.first_stage
        if not _agree(rep.estimate, _ratio_range(rep.reduced_form, rep.first_stage)):
            notes.append(
                f"the reported estimate {rep.estimate:g} does not match reduced form / first "
                f"stage = {rep.reduced_form:g}/{rep.first_stage:g} = {ratio:.4g}, even allowing "
                "for rounding (different samples or controls?). The analysis uses the reported "
                "estimate; check the table")
    return notes


# ============================================================================ covariance of (ρ̂, π̂)
@dataclass(frozen=True, slots=True)
class Covariance:
    """The covariance(s) of (reduced form, first stage) used, and how they were chosen.

    ``matrices`` holds one 2×2 matrix (backed out) or the two extreme ones (worst case);
    ``inflation`` is added to ``Q₀₀`` after clipping so no interval is narrower than printed.
    """

    method: str
    matrices: tuple[np.ndarray, ...]
    correlation: float | None          # used (after clipping); None in the worst case
    implied_correlation: float | None  # before clipping
    inflation: float
    words: str

    def to_dict(self) -> dict:
        single = self.matrices[0] if len(self.matrices) == 1 else None
        return {"method": self.method,
                "rf_fs_covariance": None if single is None else float(single[0, 1]),
                "rf_fs_correlation": json_number(self.correlation),
                "implied_correlation": json_number(self.implied_correlation),
                "variance_added": self.inflation}


def _matrix(v_rr: float, v_rp: float, v_pp: float) -> np.ndarray:
    return np.array([[v_rr, v_rp], [v_rp, v_pp]])


def worst_case_matrices(b: float, s: float, p: float, sp: float) -> tuple[np.ndarray, np.ndarray]:
    r"""The two perfectly correlated covariances of ``(ρ̂, π̂)`` that bound every admissible one.

    With ``S`` printed, ``c = B·SP² + d`` and ``v_ρρ = S²P² + 2Bc − B²SP²``; ``|d| ≤ SP·S·|P|``
    is equivalent to ``|corr| ≤ 1``.  The ends ``d = ±SP·S·|P|`` give
    ``v_ρρ = (S|P| ± B·SP)²`` and correlation ±1.

    Examples
    --------
    >>> a, b = worst_case_matrices(0.5, 0.1, 2.0, 0.2)
    >>> a.round(6).tolist(), b.round(6).tolist()
    ([[0.09, 0.06], [0.06, 0.04]], [[0.01, -0.02], [-0.02, 0.04]])
    """
    out = []
    for sign in (1.0, -1.0):
        d = sign * sp * s * abs(p)
        out.append(_matrix((s * abs(p) + sign * b * sp) ** 2, b * sp * sp + d, sp * sp))
    return out[0], out[1]


def choose_covariance(rep: Reported, sp: float) -> tuple[Covariance, list[str]]:
    """Back the covariance out of the printed IV se, or take the worst case; say which."""
    b, s, p = rep.estimate, rep.se, rep.first_stage
    notes: list[str] = []
    sr = rep.reduced_form_se
    if sr is not None and abs(b) * sp > BACKOUT_TOL * s * abs(p):
        c = (sr * sr + b * b * sp * sp - s * s * p * p) / (2.0 * b)
        implied = c / (sr * sp)
        if -1.0 <= implied <= 1.0:
            words = ("covariance of reduced form and first stage backed out from the reported "
                     f"IV se by the delta method (implied correlation {implied:.4g}); the "
                     "delta-method variance of (rho - gamma)/pi is used at every direct effect")
            return Covariance(METHOD_BACKED_OUT, (_matrix(sr * sr, c, sp * sp),), implied,
                              implied, 0.0, words), notes
        clipped = max(-1.0, min(1.0, implied))
        c = clipped * sr * sp
        q00 = (sr * sr - 2.0 * b * c + b * b * sp * sp) / (p * p)
        inflation = max(0.0, s * s - q00)
        words = ("covariance of reduced form and first stage backed out from the reported IV "
                 f"se by the delta method; the implied correlation {implied:.4g} lies outside "
                 f"[-1, 1] (rounding in the printed table) and was clipped to {clipped:g}"
                 + ("; the variance at zero direct effect is kept at the reported se^2"
                    if inflation > 0 else "")
                 + "; the delta-method variance of (rho - gamma)/pi is used at every direct "
                 "effect")
        notes.append(
            f"the printed standard errors are not mutually consistent: the IV se {s:g}, "
            f"reduced-form se {sr:g} and first-stage se {sp:g} imply a correlation of "
            f"{implied:.4g} between reduced form and first stage; it was clipped to "
            f"{clipped:g} (check the table for a typo if rounding cannot explain this)")
        return Covariance(METHOD_CLIPPED, (_matrix(sr * sr, c, sp * sp),), clipped, implied,
                          inflation, words), notes
    reason = ("no reduced-form se is printed" if sr is None else
              "the estimate is zero, so the reported IV se carries no information on it")
    words = (f"covariance of reduced form and first stage unknown ({reason}): worst case over "
             "all correlations admissible with the reported IV se, i.e. se(gamma) = se + "
             "|gamma| * first-stage se / first-stage^2 (reduced form and first stage perfectly "
             "correlated in the least favourable direction); the weak-instrument-robust set "
             "is the union over the two extreme correlations")
    if sr is not None:
        notes.append("the reduced-form se was not used: " + reason)
    return Covariance(METHOD_WORST, worst_case_matrices(b, s, p, sp), None, None, 0.0,
                      words), notes


def core_from(estimate: float, first_stage: float, matrix: np.ndarray, critical: float,
              inflation: float = 0.0) -> Core:
    """The :class:`~sensiv.sensitivity.bounds.Core` of ``(ρ̂ − γ)/π̂`` for one covariance of ``(ρ̂, π̂)``.

    Examples
    --------
    >>> core = core_from(0.5, 2.0, np.array([[0.01, 0.0], [0.0, 0.04]]), 1.96)
    >>> core.quad.round(6).tolist()
    [[0.005, 0.0025], [0.0025, 0.0025]]
    """
    b, p = estimate, first_stage
    v_rr, v_rp, v_pp = float(matrix[0, 0]), float(matrix[0, 1]), float(matrix[1, 1])
    q00 = (v_rr - 2.0 * b * v_rp + b * b * v_pp) / (p * p) + inflation
    q01 = (b * v_pp - v_rp) / p**3
    q11 = v_pp / p**4
    quad = np.array([[q00, q01], [q01, q11]])
    return Core(FOCUS, (INSTRUMENT,), b, np.array([1.0 / p]), quad, critical)


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
class PublishedResult:
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

    def to_markdown(self) -> str:
        return published_markdown(self)


# ============================================================================ the analysis
def _one(value, what: str):
    if isinstance(value, (str, RangeSpec, prior_layer.Prior)) or value is None:
        return value
    items = list(value)
    if len(items) != 1:
        raise InputError(f"{len(items)} {what} given; a published stress test has one "
                         f"instrument, so give exactly one {what}")
    return items[0]


def _resolve_range(direct, rep: Reported) -> tuple[Interval, Interval | None, str]:
    spec = bounds.parse_range(direct) if isinstance(direct, str) else direct
    if not isinstance(spec, RangeSpec):
        raise InputError("--direct must be a range LOW:HIGH, e.g. --direct=-0.1:0.1")
    if spec.unit == "sd":
        raise InputError(f"--direct '{spec.text()}': the 'sd' unit needs the standard "
                         "deviations of the outcome and the instrument, which a published "
                         "table does not give; state the range in outcome units (no suffix) or "
                         "as a share of the reduced form ('rf')")
    rf = rep.reduced_form if rep.reduced_form is not None else rep.estimate * rep.first_stage
    if spec.unit == "rf":
        if rf == 0.0:
            raise InputError(f"--direct '{spec.text()}': the reduced form is zero here, so a "
                             "share of it is zero; state the range in outcome units")
        lo, hi = sorted((spec.low * rf, spec.high * rf))
    else:
        lo, hi = spec.low, spec.high
    in_rf = None if rf == 0.0 else Interval(*sorted((lo / rf, hi / rf)))
    return Interval(lo, hi), in_rf, spec.text()


def _prior_part(law, core: Core, level: float) -> PriorPart:
    law = prior_layer.parse_prior(law) if isinstance(law, str) else law
    if law.kind == "normal":
        interval, center = prior_layer.normal_interval(core, np.array([law.params[0]]),
                                                       np.array([[law.params[1] ** 2]]))
        method = "closed-form"
    else:
        interval, center = prior_layer.quadrature_interval(core, law, level)
        method = "quadrature"
    return PriorPart(law.text(), interval, center, method, None)


def _hull_curve(cores: list[Core], vertices: np.ndarray, scales: np.ndarray
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Union-interval ends and identified-set ends over ``scales``.

    Worst case: the interval at each γ is the hull of the cores' intervals (see module doc);
    the identified set depends on the estimate and the slope only, which the cores share.
    """
    ends = [bounds.union_curve(core, vertices, scales) for core in cores]
    lo = np.min([e[0] for e in ends], axis=0)
    hi = np.max([e[1] for e in ends], axis=0)
    id_lo, id_hi = bounds.identified_curve(cores[0], vertices, scales)
    return lo, hi, id_lo, id_hi


def _hull_frontier(cores: list[Core], vertices: np.ndarray, thresholds: np.ndarray,
                   uninformative: bool) -> Frontier:
    """The breakdown frontier; in the worst case the least favourable of the two cores at
    every threshold (the smaller scale, the breakdown direct effects nearest zero), as for the
    single threshold of the analysis.  The cores share the interval at zero direct effect
    (``Q₀₀ = S²`` for both), hence the side of each threshold."""
    parts = [bounds.breakdown_frontier(core, vertices, thresholds, uninformative=uninformative)
             for core in cores]
    if len(parts) == 1:
        return parts[0]
    return Frontier(parts[0].threshold, np.min([f.scale for f in parts], axis=0),
                    parts[0].side, np.max([f.direct_lower for f in parts], axis=0),
                    np.min([f.direct_upper for f in parts], axis=0))


def published_analysis(*, estimate: float, se: float, first_stage: float,
                       first_stage_se: float | None = None, first_stage_f: float | None = None,
                       reduced_form: float | None = None, reduced_form_se: float | None = None,
                       n: int | None = None, direct, prior=None, threshold: float = 0.0,
                       points: int = bounds.DEFAULT_POINTS,
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
    if not isinstance(points, int) or isinstance(points, bool) or points < 2:
        raise InputError(f"--points {points} is too small; give at least 2 curve points")
    if not math.isfinite(threshold):
        raise InputError("--threshold must be a finite number")
    direct = _one(direct, "--direct range(s)")
    if direct is None:
        raise InputError("--direct LOW:HIGH is required: the assumed range of the direct effect")
    prior = _one(prior, "--prior law(s)")
    gamma_set, gamma_rf, range_text = _resolve_range(direct, rep)
    law = prior_layer.parse_prior(prior) if isinstance(prior, str) else prior

    notes = consistency_notes(rep)
    for message in notes:
        warnings.warn(message, InconsistentInputWarning, stacklevel=2)
    b, p = rep.estimate, rep.first_stage
    sp = rep.first_stage_se if rep.first_stage_se is not None else abs(p) / math.sqrt(
        rep.first_stage_f)
    cov, cov_notes = choose_covariance(rep, sp)
    notes += cov_notes
    if cov.method == METHOD_CLIPPED:
        for message in cov_notes:
            warnings.warn(message, InconsistentInputWarning, stacklevel=2)
    critical = dist.normal_quantile(0.5 + 0.5 * confidence_level)
    cores = [core_from(b, p, m, critical, cov.inflation) for m in cov.matrices]
    ar_critical = dist.chi2_quantile(confidence_level, 1)
    forms = [ReducedForm(np.array([b * p]), np.array([p]), m[:1, :1].copy(), m[:1, 1:].copy(),
                         m[1:, 1:].copy(), ar_critical) for m in cov.matrices]

    dset = bounds.box_set((INSTRUMENT,), [(gamma_set.low, gamma_set.high)])
    scales = np.linspace(0.0, 1.0, points)
    lo, hi, id_lo, id_hi = _hull_curve(cores, dset.vertices, scales)
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
        warnings.warn(message, WeakInstrumentWarning, stacklevel=2)

    lowers, uppers = zip(*(bounds.direct_breakdown(core, threshold) for core in cores))
    below = [v[0] for v in lowers if v[0] is not None]
    above = [v[0] for v in uppers if v[0] is not None]
    direct_lower = max(below) if below else None
    direct_upper = min(above) if above else None
    if uninformative:
        t_star = 0.0
    else:
        found = [t for t in (bounds.breakdown_scale(core, dset.vertices, threshold)
                             for core in cores) if t is not None]
        t_star = min(found) if found else None
    base = cores[0].interval(np.zeros(1))
    extended = None
    if t_star is not None and t_star > 1.0:
        wide = np.linspace(0.0, min(bounds.EXTEND_FACTOR * t_star, bounds.SCALE_MAX), points)
        extended = Curve(wide, *_hull_curve(cores, dset.vertices, wide))
    frontier = _hull_frontier(cores, dset.vertices,
                              bounds.frontier_thresholds(wald, threshold, base), uninformative)
    if uninformative or base.contains(threshold):
        conclusion = f"none: at zero direct effect the interval already contains {threshold:g}"
    else:
        conclusion = f"{FOCUS} effect {'>' if base.low > threshold else '<'} {threshold:g}"

    pieces = []
    for form in forms:
        pieces.extend(bounds.robust_set(form, dset)[0])
    ar = bounds.merge_intervals(pieces)
    hull = Interval(ar[0].low, ar[-1].high) if ar else None
    if cov.method == METHOD_WORST:
        # The AR variance at β₀ is Var(ρ̂ − β₀π̂), whose worst case grows with |β₀ − B|; a gap
        # to the Wald union then reflects the unknown covariance, not a weak first stage.
        notes.append("the weak-instrument-robust set is a worst case too: it allows a "
                     "reduced-form se of up to "
                     f"{rep.se * abs(p) + abs(b) * sp:.4g} (se x |first stage| + |estimate| x "
                     "first-stage se); the printed reduced-form se and its covariance with the "
                     "first stage would narrow it")
    elif not uninformative and (hull is None or not hull.bounded or abs(
            hull.width - wald.width) > bounds.MATERIAL_SHARE * wald.width):
        message = ("the weak-instrument-robust (Anderson-Rubin) sensitivity set differs "
                   "materially from the union of Wald intervals, a sign of a weak first stage; "
                   "prefer the robust set")
        notes.append(message)
        warnings.warn(message, WeakInstrumentWarning, stacklevel=2)

    prior_part = None
    if law is not None:
        widest = max(cores, key=lambda c: c.quad[0, 0])
        prior_part = _prior_part(law, widest, confidence_level)
    return PublishedResult(
        reported=rep, confidence_level=confidence_level, estimate=b,
        se=max(c.se for c in cores), first_stage_se=sp, first_stage_wald=wald_stat,
        direct_set=gamma_set, direct_set_rf=gamma_rf, range_text=range_text,
        identified_set=Interval(float(id_lo[-1]), float(id_hi[-1])), union_ci=union,
        union_ci_wald=wald,
        breakdown=Breakdown(threshold, t_star, (direct_lower,), (direct_upper,), conclusion),
        curve=Curve(scales, lo, hi, id_lo, id_hi), ar_set=ar,
        ar_method="exact" if len(forms) == 1 else "exact, union over the two extreme "
                                                  "correlations",
        covariance=cov, prior=prior_part, notes=tuple(dict.fromkeys(notes)),
        frontier=frontier, curve_extended=extended)


# ============================================================================ text and Markdown
# (formatting only; kept beside the result until summary.py / report.py take it over)
def _reported_line(rep: Reported) -> str:
    parts = [f"estimate {format_number(rep.estimate)} (se {format_number(rep.se)})"]
    fs = f"first stage {format_number(rep.first_stage)}"
    extra = []
    if rep.first_stage_se is not None:
        extra.append(f"se {format_number(rep.first_stage_se)}")
    if rep.first_stage_f is not None:
        extra.append(f"F {format_number(rep.first_stage_f)}")
    parts.append(fs + f" ({', '.join(extra)})")
    if rep.reduced_form is not None or rep.reduced_form_se is not None:
        rf = "n/a" if rep.reduced_form is None else format_number(rep.reduced_form)
        rse = "" if rep.reduced_form_se is None else f" (se {format_number(rep.reduced_form_se)})"
        parts.append(f"reduced form {rf}{rse}")
    if rep.n is not None:
        parts.append(f"n = {rep.n}")
    return "; ".join(parts)


def _breakdown_words(res: PublishedResult) -> list[str]:
    b = res.breakdown
    lines = ["Breakdown: " + (
        "the conclusion holds for every scaling of the range up to 1000x" if b.scale is None
        else "no conclusion to break" if b.scale == 0 else
        f"the conclusion holds until the range is scaled by {format_number(b.scale)}"
        + (" (it survives the assumed range)" if b.scale > 1 else
           " (it does NOT survive the assumed range)"))]
    lo, hi = b.direct_lower[0], b.direct_upper[0]
    lo_t = "none" if lo is None else format_number(lo)
    hi_t = "none" if hi is None else format_number(hi)
    lines.append(f"  the interval reaches {b.threshold:g} at a direct effect of {lo_t} (below "
                 f"zero) or {hi_t} (above zero)")
    return lines


def _ar_text(res: PublishedResult) -> str:
    return " U ".join(str(p) for p in res.ar_set) if res.ar_set else "empty"


def _summary_lines(res: PublishedResult) -> list[str]:
    pct = f"{100 * res.confidence_level:g}%"
    rf = f" | {res.direct_set_rf} (share of reduced form)" if res.direct_set_rf else ""
    lines = [
        "Direct-effect stress test from reported numbers only (one instrument, no data)",
        "Reported: " + _reported_line(res.reported),
        f"Covariance of reduced form and first stage: {res.covariance.method}",
        "",
        f"Assumed direct effect of the instrument on the outcome: {res.direct_set} (outcome "
        f"units){rf}",
        "",
        f"Identified set (no sampling error):    {res.identified_set}",
        f"Union of {pct} intervals over the set: {res.union_ci}",
        f"Weak-instrument-robust {pct} set:      {_ar_text(res)} ({res.ar_method})",
        "",
        f"Conclusion examined: {res.breakdown.conclusion}",
        *_breakdown_words(res),
    ]
    if res.prior is not None:
        pr = res.prior
        lines += ["", f"{pct} prior interval (direct effect ~ {pr.law}): {pr.interval}  "
                      f"(center {format_number(pr.center)}, method: {pr.method})"]
    for note in res.notes:
        lines += ["", "Warning: " + note]
    lines += ["", "Assumptions:"] + [f"  - {a}" for a in res.assumptions()]
    lines += ["", CAUTION]
    return lines


def published_markdown(res: PublishedResult) -> str:
    """Markdown report of a published stress test."""
    from sensiv.present.tables import markdown_table

    pct = f"{100 * res.confidence_level:g}%"
    b = res.breakdown
    scale = "never (within 1000x)" if b.scale is None else format_number(b.scale, 6)
    rows = [
        ["reported estimate", f"{format_number(res.estimate, 6)} (se "
                              f"{format_number(res.se, 6)})"],
        ["assumed direct effect (outcome units)", str(res.direct_set)],
        ["assumed direct effect (share of reduced form)",
         str(res.direct_set_rf) if res.direct_set_rf else "n/a"],
        ["identified set", str(res.identified_set)],
        [f"union of {pct} intervals", str(res.union_ci)],
        [f"weak-IV-robust {pct} set", _ar_text(res)],
        ["conclusion examined", b.conclusion],
        ["breakdown scale of the range", scale],
        ["breakdown direct effect (below / above zero)",
         f"{'none' if b.direct_lower[0] is None else format_number(b.direct_lower[0], 6)} / "
         f"{'none' if b.direct_upper[0] is None else format_number(b.direct_upper[0], 6)}"],
    ]
    if res.prior is not None:
        rows.append([f"{pct} prior interval ({res.prior.law}, {res.prior.method})",
                     str(res.prior.interval)])
    notes = "".join(f"\n**Warning:** {n}\n" for n in res.notes)
    return ("# Direct-effect stress test from reported numbers\n\n"
            f"Reported: {_reported_line(res.reported)}.\n\n"
            f"**Approximation:** {res.approximation}.\n\n"
            f"{markdown_table(['quantity', 'value'], rows)}{notes}\n"
            "## Assumptions\n\n" + "\n".join(f"- {a}" for a in res.assumptions())
            + f"\n\n> {CAUTION}\n")
