"""Words for the bias-aware interval of a sweep or a published stress test (formatting only)."""

from __future__ import annotations

from sensiv.core.results import format_number
from sensiv.present.text_units import direct_effect_words


def bias_aware_line(ba, confidence_level: float) -> str:
    """One line: the bias-aware interval, its centre, worst-case bias, se and critical value."""
    pct = f"{100 * confidence_level:g}%"
    return (f"Bias-aware {pct} interval:             {ba.ci}  (2SLS at the {ba.centre}: "
            f"{format_number(ba.estimate)}, worst-case bias {format_number(ba.max_bias)}, "
            f"largest se {format_number(ba.se)}, critical value "
            f"{format_number(ba.critical_value)}; Armstrong & Kolesar 2021)")


def bias_aware_breakdown(scale: float | None, what: str = "set", units=None,
                         outcome: str = "outcome") -> str:
    """The bias-aware breakdown scale in words (``what``: "set" or "range"), led by the
    direct effect it stands for when ``units`` (a ``DirectUnits``) is given."""
    if scale is None:
        return f"the bias-aware interval stays clear for every scaling of the {what} up to 1000x"
    if scale == 0.0:
        return "the bias-aware interval at zero direct effect has no conclusion to break"
    lead = (f"at {direct_effect_words(units, outcome)}, that is " if units is not None else "")
    return (f"the bias-aware interval reaches the threshold {lead}when the {what} is scaled "
            f"by {format_number(scale)}")


def bias_aware_cells(ba, confidence_level: float) -> list[list[str]]:
    """Markdown rows (quantity, value) for a report."""
    pct = f"{100 * confidence_level:g}%"
    return [[f"bias-aware {pct} interval (2SLS at the {ba.centre})", str(ba.ci)],
            ["bias-aware: estimate / worst-case bias / largest se / critical value",
             " / ".join(format_number(v) for v in (ba.estimate, ba.max_bias, ba.se,
                                                       ba.critical_value))]]


def shown_optimal(res):
    """The optimally weighted interval of ``res`` when it was traced (overidentified), else
    None (just identified it is the 2SLS-centred interval, already shown)."""
    opt = getattr(res, "bias_aware_optimal", None)
    return opt if opt is not None and opt.traced else None


def optimal_line(opt, confidence_level: float) -> str:
    """One line: the optimally weighted bias-aware interval and its length ratio."""
    pct = f"{100 * confidence_level:g}%"
    ba = opt.interval
    ratio = ("" if opt.length_ratio is None
             else f", {format_number(opt.length_ratio)} x the length of the 2SLS-centred one")
    return (f"Bias-aware {pct}, optimal weights:     {ba.ci}  (estimate "
            f"{format_number(ba.estimate)}, worst-case bias {format_number(ba.max_bias)}, "
            f"largest se {format_number(ba.se)}{ratio})")


def optimal_cells(opt, confidence_level: float) -> list[list[str]]:
    """Markdown rows (quantity, value) for a report."""
    pct = f"{100 * confidence_level:g}%"
    ratio = "n/a" if opt.length_ratio is None else format_number(opt.length_ratio)
    return [[f"bias-aware {pct} interval (optimal weights on the instruments)",
             str(opt.interval.ci)],
            ["optimal / 2SLS-centred bias-aware length", ratio]]
