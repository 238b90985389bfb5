"""Plain-text and Markdown summaries of a per-instrument analysis (formatting only)."""

from __future__ import annotations

from sensiv.core.results import format_number
from sensiv.present.tables import markdown_table
from sensiv.present.text_per_instrument import (direct_effects_cells, direct_effects_lines,
                                                invalid_count_cells, invalid_count_lines,
                                                prior_effects_cells, prior_effects_lines)
from sensiv.sensitivity.published_table import CAUTION, PublishedTableResult

WEIGHT_WORDS = {"first": "first-order weights", "second": "second-order weights"}


def _p(value) -> str:
    return "n/a" if value is None else format_number(value, 3)


def ivw_lines(res: PublishedTableResult) -> list[str]:
    """The IVW estimate with both SEs, intervals and Cochran's Q, for each weight order."""
    pct = f"{100 * res.confidence_level:g}%"
    out = []
    for fit in (res.ivw_first, res.ivw_second):
        chosen = " (chosen)" if fit.order == res.weights else ""
        out.append(f"IVW, {WEIGHT_WORDS[fit.order]}{chosen}: {format_number(fit.estimate)} "
                   f"(fixed-effect se {format_number(fit.se_fixed)}, {pct} CI {fit.ci_fixed}; "
                   f"random-effects se {format_number(fit.se_random)}, {pct} CI "
                   f"{fit.ci_random})")
        if fit.q is not None:
            out.append(f"  Cochran's Q = {format_number(fit.q)} on {fit.q_df} df, "
                       f"p = {_p(fit.q_pvalue)} (heterogeneity of the ratio estimates)")
    return out


def yardstick_lines(res: PublishedTableResult) -> list[str]:
    """One line per robust yardstick, or the reason it is not available."""
    pct = f"{100 * res.confidence_level:g}%"
    y = res.yardsticks
    out = []
    if y.egger is None:
        out.append(f"MR-Egger: {y.reasons.get('egger', 'not available')}")
    else:
        e = y.egger
        out.append(f"MR-Egger slope: {format_number(e.slope)} (se {format_number(e.slope_se)}, "
                   f"{pct} CI {e.slope_ci}); intercept (average directional pleiotropy) "
                   f"{format_number(e.intercept)} (se {format_number(e.intercept_se)}, "
                   f"p = {_p(e.intercept_pvalue)}); residual scale "
                   f"{format_number(e.residual_scale)}")
    for key, title in (("weighted_median", "Weighted median"), ("mode", "Mode-based estimate")):
        value = getattr(y, key)
        if value is None:
            out.append(f"{title}: {y.reasons.get(key, 'not available')}")
            continue
        extra = "" if value.phi is None else f", bandwidth φ = {value.phi:g}"
        out.append(f"{title}: {format_number(value.estimate)} (bootstrap se "
                   f"{format_number(value.se)}, {pct} CI {value.ci}; {value.reps} reps, seed "
                   f"{value.seed}{extra})")
    return out


def sensitivity_lines(res: PublishedTableResult) -> list[str]:
    """Direct-effect bounds, prior interval and invalid-count breakdown, as far as present."""
    out = []
    for part, lines in ((res.direct, direct_effects_lines), (res.prior, prior_effects_lines),
                        (res.invalid, invalid_count_lines)):
        if part is not None:
            out += lines(part)
    return out


def sensitivity_cells(res: PublishedTableResult) -> list[list[str]]:
    """Markdown rows of the same parts."""
    out = []
    for part, cells in ((res.direct, direct_effects_cells), (res.prior, prior_effects_cells),
                        (res.invalid, invalid_count_cells)):
        if part is not None:
            out += cells(part)
    return out


def per_instrument_text(res: PublishedTableResult) -> str:
    """The plain-text summary printed by ``sensiv published --per-instrument``."""
    lines = [f"Per-instrument analysis of {res.table}: {res.associations.count} instruments",
             *ivw_lines(res), "Yardsticks (robust estimators, each under its own assumption):",
             *("  " + line for line in yardstick_lines(res)),
             *sensitivity_lines(res), "Assumptions:", *(f"  - {a}" for a in res.assumptions()),
             *(f"Note: {n}" for n in res.notes), CAUTION]
    return "\n".join(lines)


def per_instrument_markdown(res: PublishedTableResult) -> str:
    """The Markdown report of a per-instrument analysis (written to ``--out``)."""
    rows = [f"| {a} | {format_number(bx)} | {format_number(sx)} | {format_number(by)} | "
            f"{format_number(sy)} | {format_number(by / bx)} |"
            for a, bx, sx, by, sy in zip(res.associations.names, res.associations.first_stage,
                                         res.associations.first_stage_se,
                                         res.associations.reduced_form,
                                         res.associations.reduced_form_se)]
    parts = [f"# Per-instrument analysis of {res.table}", "",
             *(f"- {line.strip()}" for line in ivw_lines(res)), "",
             "## Yardsticks", "", *(f"- {line}" for line in yardstick_lines(res)), "",
             *(["## Sensitivity", "", markdown_table(["quantity", "value"],
                                                     sensitivity_cells(res)), ""]
               if sensitivity_cells(res) else []),
             "## Instruments", "",
             "| instrument | first stage | se | reduced form | se | ratio |",
             "| --- | --- | --- | --- | --- | --- |", *rows, "",
             "## Assumptions", "", *(f"- {a}" for a in res.assumptions()), "",
             *(f"Note: {n}\n" for n in res.notes), CAUTION, ""]
    return "\n".join(parts)
