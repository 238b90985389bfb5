r"""The printed numbers of a published IV table, validated, and checked against each other.

:func:`check_reported` turns the caller's numbers into a :class:`Reported` (raising
:class:`~sensiv.core.errors.InputError` for the caller's mistakes); :func:`consistency_notes`
compares them within their printed rounding; :func:`resolve_range` reads the assumed range of
the direct effect in outcome units or as a share of the reduced form.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from sensiv.core.errors import InputError
from sensiv.core.limits import PUBLISHED_MAGNITUDE, check_magnitude
from sensiv.core.results import Interval
from sensiv.sensitivity.direct_sets import RangeSpec, parse_range
from sensiv.sensitivity.prior_laws import Prior

# Relative slack for consistency checks of numbers given at full precision (floating point).
CONSISTENCY_FLOOR = 1e-9


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
    check_magnitude(number, flag, PUBLISHED_MAGNITUDE, tiny=True)
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


def one_value(value, what: str):
    """The single range or prior law of a one-instrument stress test: ``value`` itself, or the
    only element of a sequence (InputError for any other count)."""
    if isinstance(value, (str, RangeSpec, Prior)) or value is None:
        return value
    items = list(value)
    if len(items) != 1:
        raise InputError(f"{len(items)} {what} given; a published stress test has one "
                         f"instrument, so give exactly one {what}")
    return items[0]


def resolve_range(direct, rep: Reported) -> tuple[Interval, Interval | None, str]:
    """The assumed range of the direct effect in outcome units, as a share of the reduced form
    (``None`` when that is zero) and as written; the ``sd`` unit needs SDs a table lacks."""
    spec = parse_range(direct) if isinstance(direct, str) else direct
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
