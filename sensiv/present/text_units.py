"""Words for a breakdown read as a direct effect in outcome units, as a share of the reduced
form and in outcome SDs per instrument SD (formatting only; the numbers come from
:class:`sensiv.sensitivity.breakdown_units.DirectUnits`)."""

from __future__ import annotations

from sensiv.core import labels
from sensiv.core.results import format_number


def outcome_amount(value: float, outcome: str = "outcome", instrument: str = "") -> str:
    """A direct effect in outcome units: ``0.01417 t/ha`` when the label of ``outcome`` states
    its unit (``t/ha per metre`` with the instrument's), else ``0.01417 in outcome units``."""
    unit = labels.direct_unit(outcome, instrument)
    return f"{format_number(value)} {unit}" if unit else f"{format_number(value)} in outcome units"


def one_instrument(units, k: int, outcome: str = "outcome") -> str:
    """Instrument ``k``'s direct effect in every available unit, e.g. ``0.01417 in outcome
    units (31.02% of the reduced form; 0.1103 outcome SD per instrument SD)``."""
    extra = []
    if units.rf[k] is not None:
        extra.append(f"{format_number(100 * units.rf[k])}% of the reduced form")
    if units.sd[k] is not None:
        extra.append(f"{format_number(units.sd[k])} outcome SD per instrument SD")
    text = outcome_amount(units.outcome[k], outcome, units.instruments[k])
    return text + (f" ({'; '.join(extra)})" if extra else "")


def direct_effect_words(units, outcome: str = "outcome") -> str:
    """The direct effects of a breakdown set, one instrument or several together."""
    if len(units.instruments) == 1:
        return f"a direct effect of {one_instrument(units, 0, outcome)}"
    parts = [f"{labels.name(z)}: {one_instrument(units, k, outcome)}"
             for k, z in enumerate(units.instruments)]
    return "direct effects of " + ", ".join(parts) + " (all at once, each as large in absolute value)"


def breakdown_sentence(scale: float | None, units, what: str = "set",
                       outcome: str = "outcome") -> str:
    """The breakdown in words: the direct effect first, the scale of the stated ``what``
    ("set" or "range") second.  ``scale`` is ``None`` (no breakdown within 1000×) or ``0``
    (no conclusion at zero direct effect) or a positive breakdown scale."""
    if scale is None:
        return f"the conclusion holds for every scaling of the {what} up to 1000x"
    if scale == 0:
        return ("no conclusion to break: at zero direct effect the interval already contains "
                "the threshold")
    verdict = (f"it survives the assumed {what}" if scale > 1 else
               f"it does NOT survive the assumed {what}")
    lead = (f"the conclusion holds up to {direct_effect_words(units, outcome)}"
            if units is not None else "the conclusion holds")
    return f"{lead}; that is {format_number(scale)} × the stated {what} ({verdict})"


def table_words(units, outcome: str = "outcome") -> str:
    """Compact words for a table cell: ``direct effect up to 0.01417 (31.02% of reduced
    form; 0.1103 SD)`` per instrument (largest absolute value of the scaled set)."""
    parts = []
    for k, z in enumerate(units.instruments):
        extra = []
        if units.rf[k] is not None:
            extra.append(f"{format_number(100 * units.rf[k])}% of reduced form")
        if units.sd[k] is not None:
            extra.append(f"{format_number(units.sd[k])} SD")
        name = f"{labels.name(z)} " if len(units.instruments) > 1 else ""
        unit = labels.direct_unit(outcome, z)
        parts.append(f"{name}{format_number(units.outcome[k])}{' ' + unit if unit else ''}"
                     + (f" ({'; '.join(extra)})" if extra else ""))
    return "direct effect up to " + ", ".join(parts)


def _nearest(lo, hi) -> tuple[str, str] | None:
    """Where the crossings are (``a direct effect of -0.03 (nearest below zero) or 0.052
    (nearest above zero)``) and, for a side without one, a clause that says so; ``None``
    without any."""
    below = None if lo is None else f"{format_number(lo)} (nearest below zero)"
    above = None if hi is None else f"{format_number(hi)} (nearest above zero)"
    if below and above:
        return f"a direct effect of {below} or {above}", ""
    if below or above:
        side = "positive" if above is None else "negative"
        return f"a direct effect of {below or above}", f"; no {side} direct effect does"
    return None


def crossing_lines(instruments, b) -> list[str]:
    """Per instrument alone, where an end of the interval crosses the threshold: where the
    conclusion breaks, or — when there is no conclusion at zero direct effect — where one
    would first appear."""
    theta = format_number(b.threshold)
    lines = []
    for z, lo, hi in zip(instruments, b.direct_lower, b.direct_upper):
        found = _nearest(lo, hi)
        if found is None:
            what = (f"makes a conclusion about {theta} appear" if b.scale == 0 else
                    f"makes an end of the interval cross {theta}")
            lines.append(f"  {labels.name(z)} alone: no direct effect {what}")
            continue
        where, other_side = found
        if b.scale == 0:
            lines.append(f"  {labels.name(z)} alone: a conclusion about {theta} would first "
                         f"appear at {where}, where the interval stops containing it"
                         + other_side)
        else:
            lines.append(f"  {labels.name(z)} alone: an end of the interval crosses {theta} at "
                         f"{where}{other_side}")
    return lines


def units_cells(units, what: str) -> list[list[str]]:
    """Markdown rows (quantity, value): the direct effect of a breakdown per instrument in
    outcome units, as a share of the reduced form and in SD units (none without a breakdown)."""
    if units is None:
        return []
    rows = []
    for k, z in enumerate(units.instruments):
        name = f", {labels.name(z)}" if len(units.instruments) > 1 else ""
        rf = "n/a" if units.rf[k] is None else f"{format_number(100 * units.rf[k])}%"
        sd = "n/a" if units.sd[k] is None else format_number(units.sd[k])
        rows.append([f"{what} direct effect{name} (outcome units / share of reduced form / "
                     "outcome SD per instrument SD)",
                     f"{format_number(units.outcome[k])} / {rf} / {sd}"])
    return rows
