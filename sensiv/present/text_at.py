"""The table of intervals at a user-chosen grid of direct effects (``sweep --at``), as cells
for the terminal and for Markdown (formatting only)."""

from __future__ import annotations

from sensiv.core.results import format_number


def at_heading(res) -> str:
    """What each row of the grid means."""
    who = ("the instrument" if len(res.instruments) == 1 else
           f"every instrument at once ({', '.join(res.instruments)})")
    return (f"Intervals at given direct effects (each row: direct effects between −v and v "
            f"for {who})")


def at_cells(res) -> tuple[list[str], list[list[str]]]:
    """Header and rows: the value as given, in outcome units when given in another unit, the
    identified set, the union of intervals and the bias-aware interval."""
    pct = f"{100 * res.confidence_level:g}%"
    header = ["v", "identified set", f"union of {pct} intervals", f"bias-aware {pct} interval"]
    rows = []
    for p in res.at:
        given = p.given.text()
        if p.given.unit:
            given += " = ±" + "/".join(format_number(v) for v in p.direct) + " (outcome units)"
        rows.append([given, str(p.identified_set), str(p.union_ci), str(p.bias_aware_ci)])
    return header, rows
