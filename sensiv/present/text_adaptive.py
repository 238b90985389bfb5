"""Plain-text summary of the falsification adaptive set (formatting only, no new statistics)."""

from __future__ import annotations

from sensiv.core.results import format_number
from sensiv.sensitivity.adaptive import CAUTION, AdaptiveResult


def adaptive_text(res: AdaptiveResult) -> str:
    """Plain-text summary (formatting only)."""
    unit = "effect units" if res.units == "effect" else "SD units"
    lines = [
        f"Falsification adaptive set (Masten & Poirier 2021): {res.adaptive_set}",
        f"Smallest common relaxation that reconciles the instruments: "
        f"{format_number(res.min_relaxation)} ({unit}); the only effect consistent with it: "
        f"{format_number(res.least_relaxed_point)}",
        f"Relaxation: {res.relaxation}",
    ]
    if res.confidence_set is not None:
        lines.append(f"{100 * res.confidence_level:g}% Bonferroni confidence set for the "
                     f"adaptive set: {res.confidence_set}")
    lines.append("Single-instrument estimates (the other instruments as controls):")
    for s in res.singles:
        lines.append(f"  {s.instrument}: {format_number(s.estimate)} (se {format_number(s.se)}"
                     f"), first stage {format_number(s.first_stage)}; if it alone is valid "
                     f"the others need a relaxation of {format_number(s.relaxation_if_valid)}")
    lines.append(f"Method: {res.method}")
    for note in res.notes:
        lines += ["", "Note: " + note]
    lines += ["", "Assumptions:"] + [f"  - {a}" for a in res.assumptions()]
    lines += ["", CAUTION]
    return "\n".join(lines)
