"""Plain-text and markdown summaries of the correlation-restriction bounds
(:class:`sensiv.partial_id.correlation_results.CorrelationBounds`): formatting only, every
number comes from the result.
"""

from __future__ import annotations

import numpy as np

from sensiv.core import labels
from sensiv.core.results import format_number
from sensiv.partial_id.correlation_results import CAUTION, CorrelationBounds

# Rows shown in the text summary of the curve.
SUMMARY_CURVE_ROWS = 11


def describe_set(result: CorrelationBounds) -> str:
    """The identified set as its pieces joined by ``U`` (``"empty"`` when empty)."""
    if result.empty:
        return "empty"
    return " U ".join(str(p) for p in result.pieces)


def curve_rows(result: CorrelationBounds) -> list[list[str]]:
    """Rows ``[r̄, lower, upper, pieces]`` of the curve, thinned to about
    :data:`SUMMARY_CURVE_ROWS` evenly spaced ratios."""
    points = result.curve
    if len(points) > SUMMARY_CURVE_ROWS:
        picks = np.unique(np.round(np.linspace(0, len(points) - 1, SUMMARY_CURVE_ROWS)))
        points = tuple(points[int(j)] for j in picks)
    rows = []
    for p in points:
        hull = p.hull
        rows.append([format_number(p.max_ratio), "empty" if hull is None else
                     format_number(hull.low), "" if hull is None else format_number(hull.high),
                     str(len(p.pieces))])
    return rows


def breakdown_lines(result: CorrelationBounds) -> list[str]:
    """The conclusion, a sign reversal against 2SLS when there is one, and the breakdown r̄:
    the first r̄ at which the conclusion at r̄ = 0 (or at the smallest consistent r̄, when the
    set at r̄ = 0 is empty) stops holding."""
    theta = format_number(result.threshold)
    k, m = result.breakdown_ratio, result.min_ratio_consistent
    side = result.first_side
    if side is None:
        return ["Breakdown r̄: none to state (no r̄ ≤ 1 gives a non-empty set)"]
    at = "r̄ = 0" if m == 0 else f"r̄ = {format_number(m)} (the smallest consistent r̄)"
    if side == "contains":
        return [f"Breakdown r̄: no conclusion to break (the set at {at} already contains "
                f"{theta})"]
    lines = []
    if result.sign_reversal:
        where = "above" if side == "above" else "below"
        lines.append(f"Sign reversal: at r̄ = 0 the set is empty (the assumed {result.endogeneity} "
                     f"endogeneity contradicts the 2SLS estimate {format_number(result.tsls)}); "
                     f"from {at} the set lies entirely {where} {theta}, the reverse of 2SLS")
    elif m:
        lines.append(f"Note: at r̄ = 0 the set is empty; from {at} it lies entirely "
                     f"{side} {theta}, as 2SLS does")
    conclusion = f"{result.conclusion} at {at}"
    lines.append(f"Breakdown r̄: {format_number(k)}, the first r̄ at which the conclusion "
                 f"({conclusion}) stops holding (the set reaches {theta})" if k is not None else
                 f"Breakdown r̄: none in [0, 1] (the conclusion {conclusion} holds for every "
                 "r̄ ≤ 1)")
    return lines


def summary_lines(result: CorrelationBounds, *, markdown: bool) -> list[str]:
    """Lines of the summary: headline numbers, the curve table, notes, assumptions, caution.

    ``markdown`` gives a heading, a pipe table and bold notes instead of plain text.
    """
    pct = f"{100 * result.confidence_level:g}%"
    r = format_number(result.max_ratio)
    title = (f"Correlation-restriction bounds (Nevo & Rosen 2012): "
             f"{labels.effect_words(result.treatment, result.outcome)}")
    lines = [f"# {title}" if markdown else title, ""]
    lines.append(f"Instruments: {', '.join(map(labels.name, result.instruments))}; controls: "
                 f"{', '.join(map(labels.name, result.controls)) or 'none'}"
                 f"{' and a constant' if result.constant else ''}; n = {result.n} "
                 f"({result.n_dropped} rows dropped for missing values"
                 f"{f'; {result.n_filtered} filtered out by {result.where!r}' if result.where else ''})"
                 f"{'; weighted' if result.weighted else ''}.")
    lines.append(f"Endogeneity sign: {result.endogeneity}; ratio bound r̄ = {r}. "
                 f"2SLS (r̄ = 0): {format_number(result.tsls)}; OLS: "
                 f"{format_number(result.ols)}.")
    lines.append("")
    lines.append(f"Identified set at r̄ = {r}: {describe_set(result)}")
    for name, piece in result.pieces_by_sign:
        lines.append(f"  {name} endogeneity: {piece if piece else 'empty'}")
    if result.ci is not None:
        b = result.bootstrap
        lines.append(f"{pct} Imbens-Manski interval: {result.ci} (bootstrap: {b.n_used} of "
                     f"{b.reps} replicates used, seed {b.seed})")
    elif result.bootstrap is not None:
        lines.append(f"{pct} interval: not available (too few usable bootstrap replicates)")
    m = result.min_ratio_consistent
    lines.append("Smallest r̄ consistent with the data: "
                 + (format_number(m) if m is not None else "none in [0, 1]"))
    lines += breakdown_lines(result)
    lines.append("")
    header = ["r̄", "lower", "upper", "pieces"]
    rows = curve_rows(result)
    if markdown:
        lines.append("| " + " | ".join(header) + " |")
        lines.append("|" + "|".join("---" for _ in header) + "|")
        lines += ["| " + " | ".join(row) + " |" for row in rows]
    else:
        widths = [max(len(row[j]) for row in [header, *rows]) for j in range(len(header))]
        lines.append("  ".join(h.rjust(w) for h, w in zip(header, widths)))
        lines += ["  ".join(c.rjust(w) for c, w in zip(row, widths)) for row in rows]
    for note in result.notes:
        lines += ["", ("**Note:** " if markdown else "Note: ") + note]
    lines += ["", "## Assumptions" if markdown else "Assumptions:"]
    lines += [f"- {a}" for a in result.assumptions()]
    lines += ["", ("> " if markdown else "") + CAUTION]
    return lines


def bounds_markdown(result: CorrelationBounds) -> str:
    """Markdown report of a :class:`CorrelationBounds` (formatting only)."""
    return "\n".join(summary_lines(result, markdown=True)) + "\n"


def correlation_summary(result: CorrelationBounds) -> str:
    """Plain-text report of a :class:`CorrelationBounds`, as printed by the command line."""
    return "\n".join(summary_lines(result, markdown=False))
