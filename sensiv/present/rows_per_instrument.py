"""Table rows and summary-figure rows of a per-instrument analysis (formatting only)."""

from __future__ import annotations

from sensiv.present.figures.summary import SummaryItem
from sensiv.present.tables import NONE_TEXT, TableRow
from sensiv.sensitivity.published_table import CAUTION, PublishedTableResult
from sensiv.sensitivity.robust_estimators import ASSUMPTIONS

COVARIANCE = "from per-instrument associations"


def per_instrument_rows(res: PublishedTableResult) -> list[TableRow]:
    """IVW with fixed- and random-effects intervals, then each available yardstick."""
    level = res.confidence_level
    fit = res.ivw

    def row(name, words, estimate, se, interval):
        return TableRow(name, words, estimate, se, None, (interval,), level, None, NONE_TEXT,
                        None, COVARIANCE, CAUTION)

    rows = [row(f"IVW, {fit.order}-order weights, fixed effect",
                "every instrument valid (no direct effect)", fit.estimate, fit.se_fixed,
                fit.ci_fixed),
            row(f"IVW, {fit.order}-order weights, random effects",
                "every instrument valid; over-dispersion scaled by Cochran's Q", fit.estimate,
                fit.se_random, fit.ci_random)]
    y = res.yardsticks
    if y.egger is not None:
        rows.append(row("MR-Egger slope", ASSUMPTIONS["egger"], y.egger.slope, y.egger.slope_se,
                        y.egger.slope_ci))
        rows.append(row("MR-Egger intercept (average direct effect, outcome units)",
                        ASSUMPTIONS["egger"], y.egger.intercept, y.egger.intercept_se,
                        y.egger.intercept_ci))
    if y.weighted_median is not None:
        m = y.weighted_median
        rows.append(row("weighted median", ASSUMPTIONS["weighted_median"], m.estimate, m.se,
                        m.ci))
    if y.mode is not None:
        rows.append(row("mode-based estimate", ASSUMPTIONS["mode"], y.mode.estimate, y.mode.se,
                        y.mode.ci))
    return rows


def per_instrument_items(res: PublishedTableResult) -> list[SummaryItem]:
    """The rows of a study's summary figure: IVW (random effects) and the yardsticks."""
    level = f"{100 * res.confidence_level:g}%"
    out = [SummaryItem(f"IVW, {level} CI (random effects)", (res.ivw.ci_random,),
                       "per-instrument table: every instrument valid", "exclusion", "interval",
                       res.ivw.estimate)]
    y = res.yardsticks
    for label, value, key in (("MR-Egger slope", y.egger, "egger"),
                              ("weighted median", y.weighted_median, "weighted_median"),
                              ("mode-based estimate", y.mode, "mode")):
        if value is None:
            continue
        ci = value.slope_ci if key == "egger" else value.ci
        center = value.slope if key == "egger" else value.estimate
        out.append(SummaryItem(f"{label}, {level} CI", (ci,), ASSUMPTIONS[key],
                               "direct effect", "interval", center))
    return out
