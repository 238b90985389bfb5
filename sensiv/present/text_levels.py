"""Which coefficients a fit's text table lists: absorbed fixed effects (and the constant they
absorb) are never printed, and a categorical control with more than
:data:`MAX_LISTED_LEVELS` indicator columns gets a one-line summary instead of a row per level.
"""

from __future__ import annotations

import re

from sensiv.core.results import format_number

MAX_LISTED_LEVELS = 50
"""Indicator columns of one control above which its levels are summarised, not listed."""

_INDICATOR = re.compile(r"^(?P<control>.+)\[(?P<level>[^\]]*)\]$")
_CONSTANT = "const"


def _control_of(name: str) -> str | None:
    match = _INDICATOR.match(name)
    return match.group("control") if match else None


def listed_names(fit) -> tuple[list[str], list[str]]:
    """``(names, notes)``: the coefficient rows of the table and one line per summarised control."""
    absorption = getattr(fit, "absorption", None)
    names = [n for n in fit.tsls.names if not (absorption is not None and n == _CONSTANT)]
    counts: dict[str, int] = {}
    for name in names:
        control = _control_of(name)
        if control is not None:
            counts[control] = counts.get(control, 0) + 1
    many = {c for c, k in counts.items() if k > MAX_LISTED_LEVELS}
    notes = [f"{c}: {counts[c]} indicator coefficients not listed (more than "
             f"{MAX_LISTED_LEVELS} levels); --absorb {c} partials them out without indicator "
             "columns, faster and in less memory" for c in sorted(many)]
    return [n for n in names if _control_of(n) not in many], notes


def absorbed_line(fit) -> str | None:
    """One line naming the absorbed fixed effects, or ``None`` without any."""
    absorption = getattr(fit, "absorption", None)
    if absorption is None:
        return None
    listed = ", ".join(f"{name} ({levels} levels)"
                       for name, levels in zip(absorption.effects, absorption.levels))
    how = ("exact" if len(absorption.effects) == 1 else
           f"{absorption.iterations} step{'s' if absorption.iterations != 1 else ''}, "
           "relative tolerance "
           f"{format_number(absorption.tolerance, 2)}")
    return (f"absorbed fixed effects: {listed}; {how}; {absorption.n_singletons} singleton "
            "rows dropped; their coefficients (and the constant) are not shown")
