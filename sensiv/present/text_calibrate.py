"""Plain-text and Markdown summaries of a calibration (formatting only, no new statistics)."""

from __future__ import annotations

from sensiv.core import labels
from sensiv.core.results import format_number
from sensiv.estimation import iv
from sensiv.present.tables import markdown_table
from sensiv.sensitivity.calibrate import CAUTION, Calibration
from sensiv.sensitivity.zero_first_stage import ZeroFirstStage


def _text_table(header: list[str], rows: list[list[str]]) -> list[str]:
    widths = [max(len(r[j]) for r in [header, *rows]) for j in range(len(header))]

    def line(cells: list[str]) -> str:
        return "  " + "  ".join(c.ljust(w) if j < 2 else c.rjust(w)
                                for j, (c, w) in enumerate(zip(cells, widths)))
    return [line(header), "  " + "-" * (sum(widths) + 2 * (len(widths) - 1))] + [
        line(r) for r in rows]


def _g(value: float) -> str:
    return format_number(value, 4)


def _rows(cal: Calibration) -> list[list[str]]:
    return [[b.name, b.instrument, _g(b.implied_direct), _g(b.implied_direct_rf),
             _g(b.implied_direct_sd), _g(b.implied_direct_net), b.sweep_option]
            for b in cal.yardsticks]


YARDSTICK_HEADER = ["left out", "instrument", "implied direct", "share of RF", "SD units",
                    "net of first stage", "sweep range"]


def _zfs_lines(z: ZeroFirstStage, bullet: str) -> list[str]:
    pct = f"{100 * z.confidence_level:g}%"
    lines = [f"Zero-first-stage estimate (van Kippersluis & Rietveld 2018) in the subgroup "
             f"{z.group} == 1 (n = {z.n}, covariance: {z.se_type})"]
    for t in z.treatments:
        lines.append(f"{bullet}first stage of {t} there: F = {_g(z.first_stage_f[t])} "
                     f"(p = {format_number(z.first_stage_p_value[t], 3)})"
                     + ("  <- not weak: the premise looks false" if
                        z.first_stage_f[t] >= iv.WEAK_F else ""))
    for k, name in enumerate(z.instruments):
        lines.append(
            f"{bullet}direct effect of {name}: {_g(z.direct[k])} (se {_g(z.se[k])}); share of "
            f"RF {_g(z.direct_rf[k])}; SD units {_g(z.direct_sd[k])}; contamination if the "
            f"first stage there is not zero: {_g(z.contamination[k])}")
    lines.append(f"{bullet}as a prior: " + " ".join(f"--prior {p}" for p in z.prior_options))
    lines.append(f"{bullet}as a {pct} range: " + " ".join(z.sweep_options))
    return lines


def calibration_text(cal: Calibration) -> str:
    """Plain-text summary (formatting only)."""
    s = cal.scale
    lines = [
        f"Calibration of direct effects on {labels.name(cal.outcome)} "
        f"(treatment: {', '.join(map(labels.name, cal.treatments))}; instruments: "
        f"{', '.join(map(labels.name, cal.instruments))}; "
        f"n = {cal.n}, dropped {cal.n_dropped} with missing values"
        + (f", {cal.n_filtered} filtered out by {cal.where!r}" if cal.where else "") + ")",
        "",
        "Scale: a direct effect d of instrument z reads as d / RF (share of the reduced form) "
        "or d * SD(z) / SD(y) (SD units)",
    ]
    lines += _text_table(["instrument", "reduced form", "instrument SD"],
                    [[z, _g(r), _g(sd)] for z, r, sd in
                     zip(s.instruments, s.reduced_form, s.instrument_sd)])
    lines.append(f"outcome SD: {_g(s.outcome_sd)}")
    lines += ["", "Leave-one-out yardsticks: direct effect implied by leaving a control out "
                  "(RF without it minus RF with it)"]
    if cal.yardsticks:
        lines += _text_table(YARDSTICK_HEADER, _rows(cal))
    else:
        lines.append("  none (no controls)")
    if cal.zero_first_stage is not None:
        lines += [""] + _zfs_lines(cal.zero_first_stage, "  ")
    lines += ["", "Suggestions:"]
    lines += [f"  {s['command']} {s['options']}   # {s['source']}" for s in cal.suggestions()]
    for note in cal.notes:
        lines += ["", "Warning: " + note]
    lines += ["", "Assumptions:"] + [f"  - {a}" for a in cal.assumptions()]
    lines += ["", CAUTION]
    return "\n".join(lines)


def calibration_markdown(cal: Calibration) -> str:
    """Markdown report (formatting only)."""
    s = cal.scale
    parts = [
        f"# Calibration of direct effects on {labels.name(cal.outcome)}\n\n",
        f"Treatment: {', '.join(map(labels.name, cal.treatments))}. Instruments: "
        f"{', '.join(map(labels.name, cal.instruments))}. "
        f"Controls: {', '.join(map(labels.name, cal.controls)) or 'none'}. n = {cal.n}.\n\n",
        "## Scale\n\nA direct effect d of instrument z reads as d / RF (share of the reduced "
        "form) or d · SD(z) / SD(y) (SD units).\n\n",
        markdown_table(["instrument", "reduced form", "instrument SD"],
                       [[z, _g(r), _g(sd)] for z, r, sd in
                        zip(s.instruments, s.reduced_form, s.instrument_sd)]),
        f"\nOutcome SD: {_g(s.outcome_sd)}.\n\n## Leave-one-out yardsticks\n\n",
        (markdown_table(YARDSTICK_HEADER, _rows(cal)) if cal.yardsticks else "None.\n"),
    ]
    if cal.zero_first_stage is not None:
        z_lines = _zfs_lines(cal.zero_first_stage, "- ")
        parts.append("\n## " + z_lines[0] + "\n\n" + "\n".join(z_lines[1:]) + "\n")
    parts.append("\n## Suggestions\n\n" + "\n".join(
        f"- `{s['command']} {s['options']}` ({s['source']})" for s in cal.suggestions()) + "\n")
    for note in cal.notes:
        parts.append(f"\n**Warning:** {note}\n")
    parts.append("\n## Assumptions\n\n" + "\n".join(f"- {a}" for a in cal.assumptions())
                 + "\n")
    parts.append(f"\n> {CAUTION}\n")
    return "".join(parts)
