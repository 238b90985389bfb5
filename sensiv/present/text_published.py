"""Plain-text and Markdown summaries of a published-numbers stress test (formatting only)."""

from __future__ import annotations

from sensiv.core.results import format_number
from sensiv.present.tables import markdown_table
from sensiv.present.text_units import breakdown_sentence, units_cells
from sensiv.present.text_bias_aware import (bias_aware_breakdown, bias_aware_cells,
                                            bias_aware_line)
from sensiv.sensitivity.published import CAUTION, PublishedResult
from sensiv.sensitivity.published_inputs import Reported


def reported_line(rep: Reported) -> str:
    """The printed numbers in one line: estimate, first stage, reduced form, n."""
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


def breakdown_words(res: PublishedResult) -> list[str]:
    """The breakdown scale and the breakdown direct effects in words."""
    b = res.breakdown
    lines = ["Breakdown: " + breakdown_sentence(b.scale, b.direct_units, "range")]
    lo, hi = b.direct_lower[0], b.direct_upper[0]
    lo_t = "none" if lo is None else format_number(lo)
    hi_t = "none" if hi is None else format_number(hi)
    reach = ("stops containing" if b.scale == 0 else "reaches")
    lines.append(f"  the interval {reach} {format_number(b.threshold)} at a direct effect of "
                 f"{lo_t} (below zero) or {hi_t} (above zero)")
    return lines


def _ba_words(res: PublishedResult) -> str:
    b = res.breakdown
    return bias_aware_breakdown(b.bias_aware_scale, "range", b.bias_aware_units)


def ar_text(res: PublishedResult) -> str:
    """The weak-IV-robust set as a union of intervals (``empty`` when it is)."""
    return " U ".join(str(p) for p in res.ar_set) if res.ar_set else "empty"


def summary_lines(res: PublishedResult) -> list[str]:
    """The plain-text summary, line by line (what ``str(result)`` prints)."""
    pct = f"{100 * res.confidence_level:g}%"
    rf = f" | {res.direct_set_rf} (share of reduced form)" if res.direct_set_rf else ""
    lines = [
        "Direct-effect stress test from reported numbers only (one instrument, no data)",
        "Reported: " + reported_line(res.reported),
        f"Covariance of reduced form and first stage: {res.covariance.method}",
        "",
        f"Assumed direct effect of the instrument on the outcome: {res.direct_set} (outcome "
        f"units){rf}",
        "",
        f"Identified set (no sampling error):    {res.identified_set}",
        f"Union of {pct} intervals over the set: {res.union_ci}",
        *([bias_aware_line(res.bias_aware, res.confidence_level)]
          if res.bias_aware is not None else []),
        f"Weak-instrument-robust {pct} set:      {ar_text(res)} ({res.ar_method})",
        "",
        f"Conclusion examined: {res.breakdown.conclusion}",
        *breakdown_words(res),
        *([f"Bias-aware breakdown: {_ba_words(res)}"]
          if res.bias_aware is not None else []),
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


def published_text(res: PublishedResult) -> str:
    """The plain-text report of a stress test from printed numbers (``str(result)``)."""
    return "\n".join(summary_lines(res))


def _ba_scale(scale: float | None) -> str:
    return "never (within 1000x)" if scale is None else format_number(scale)


def published_markdown(res: PublishedResult) -> str:
    """Markdown report of a published stress test."""
    pct = f"{100 * res.confidence_level:g}%"
    b = res.breakdown
    scale = "never (within 1000x)" if b.scale is None else format_number(b.scale)
    rows = [
        ["reported estimate", f"{format_number(res.estimate)} (se "
                              f"{format_number(res.se)})"],
        ["assumed direct effect (outcome units)", str(res.direct_set)],
        ["assumed direct effect (share of reduced form)",
         str(res.direct_set_rf) if res.direct_set_rf else "n/a"],
        ["identified set", str(res.identified_set)],
        [f"union of {pct} intervals", str(res.union_ci)],
        *(bias_aware_cells(res.bias_aware, res.confidence_level)
          if res.bias_aware is not None else []),
        [f"weak-IV-robust {pct} set", ar_text(res)],
        ["conclusion examined", b.conclusion],
        ["breakdown scale of the range", scale],
        *([["bias-aware breakdown scale of the range", _ba_scale(b.bias_aware_scale)]]
          if res.bias_aware is not None else []),
        *units_cells(b.direct_units, "breakdown"),
        *(units_cells(b.bias_aware_units, "bias-aware breakdown")
          if res.bias_aware is not None else []),
        ["interval reaches the threshold at a direct effect (below / above zero)",
         f"{'none' if b.direct_lower[0] is None else format_number(b.direct_lower[0])} / "
         f"{'none' if b.direct_upper[0] is None else format_number(b.direct_upper[0])}"],
    ]
    if res.prior is not None:
        rows.append([f"{pct} prior interval ({res.prior.law}, {res.prior.method})",
                     str(res.prior.interval)])
    notes = "".join(f"\n**Warning:** {n}\n" for n in res.notes)
    return ("# Direct-effect stress test from reported numbers\n\n"
            f"Reported: {reported_line(res.reported)}.\n\n"
            f"**Approximation:** {res.approximation}.\n\n"
            f"{markdown_table(['quantity', 'value'], rows)}{notes}\n"
            "## Assumptions\n\n" + "\n".join(f"- {a}" for a in res.assumptions())
            + f"\n\n> {CAUTION}\n")
