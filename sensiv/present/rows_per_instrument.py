"""Table rows and summary-figure rows of a per-instrument analysis (formatting only)."""

from __future__ import annotations

from sensiv.core.results import format_number
from sensiv.present.figures.summary import SummaryItem
from sensiv.present.tables import NONE_TEXT, TableRow
from sensiv.sensitivity.per_instrument_sets import UNIT_WORDS
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
    return rows + sensitivity_rows(res)


def _scale_text(scale) -> str:
    if scale is None:
        return "none within the scales examined"
    if scale == 0:
        return "0: no conclusion at zero direct effect"
    return f"{format_number(scale)} × the stated range"


def sensitivity_rows(res: PublishedTableResult) -> list[TableRow]:
    """The direct-effect bounds, the prior interval and the invalid-count breakdown."""
    level, out = res.confidence_level, []
    d = res.direct
    if d is not None:
        words = (f"|direct effect| of every instrument within {d.allowance.text} "
                 f"({UNIT_WORDS[d.allowance.unit]}); IVW weights held fixed")
        out.append(TableRow("IVW with direct effects bounded per instrument", words, None, None,
                            (d.identified_set,), (d.union_ci,), level, d.breakdown.scale,
                            _scale_text(d.breakdown.scale), None, COVARIANCE, CAUTION))
        ba = d.bias_aware
        out.append(TableRow("bias-aware interval (IVW at the centre of the set)", words,
                            ba.estimate, ba.se, None, (ba.ci,), level,
                            d.breakdown.bias_aware_scale,
                            _scale_text(d.breakdown.bias_aware_scale), None, COVARIANCE,
                            CAUTION))
    p = res.prior
    if p is not None:
        out.append(TableRow("prior interval, per-instrument direct effects",
                            f"each direct effect ~ N({p.prior.mean:g}, {p.prior.sd:g}²) "
                            f"({UNIT_WORDS[p.prior.unit]}), independent", p.center, None, None,
                            (p.interval,), level, None, NONE_TEXT, None, COVARIANCE, CAUTION))
    c = res.invalid
    if c is not None and c.count is not None:
        exact = "exact" if c.exact else f"certified, gap {c.gap}"
        out.append(TableRow("invalid-count breakdown", f"any {c.count} of {c.instruments} "
                            "instruments may have any direct effect", None, None, None, None,
                            level, float(c.count), f"{c.count} of {c.instruments} instruments "
                            f"({format_number(100 * c.share, 3)}%, {exact})", None, COVARIANCE,
                            CAUTION))
    return out


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
    d = res.direct
    if d is not None:
        words = f"direct effects per instrument within {d.allowance.text}"
        out += [SummaryItem("identified set", (d.identified_set,), words, "direct effect", "set"),
                SummaryItem(f"union of {level} intervals", (d.union_ci,), words, "direct effect",
                            "interval"),
                SummaryItem(f"bias-aware {level} interval", (d.bias_aware.ci,), words,
                            "direct effect", "interval", d.bias_aware.estimate)]
    if res.prior is not None:
        p = res.prior
        out.append(SummaryItem(f"{level} prior interval", (p.interval,),
                               f"direct effects ~ N({p.prior.mean:g}, {p.prior.sd:g}²)",
                               "direct effect", "interval", p.center))
    return out
