"""The summary figure: every analysis of a run as one horizontal interval each, labelled with
its assumption, and the rows it draws.

A row is a :class:`SummaryItem`.  One builder per kind of result turns that result into its
rows (:func:`fit_items`, :func:`sweep_items`, :func:`prior_items`, :func:`published_items`,
:func:`correlation_items`, :func:`discrete_items`); which results of a run contribute which
rows, and in what order, is decided by the caller (see
:func:`sensiv.analyses.outputs.summary_rows`), so nothing here switches on result classes.
"""

from __future__ import annotations

import math
import textwrap
from collections.abc import Sequence
from dataclasses import dataclass

from sensiv.core import labels
from sensiv.core.errors import InputError
from sensiv.core.results import Interval, format_number
from sensiv.present.figures.marks import ROW_LINE_PT, row_texts
from sensiv.present.figures.style import (BLUE, CAPTION_CHARS, GREY, INK, ORANGE, RIGHT_IN,
                                          SMALL_PT, SUMMARY_LEFT_IN, SUMMARY_ROW_IN, WHITE,
                                          WIDTH_IN, ends, finish, limits, make_canvas, minus,
                                          pct, style_context)


TOP_ROOM_IN = 0.325       # above the top row's bar: room for its label and assumption
CAPTION_MARGIN_IN = 0.12  # the caption's margins, where CAPTION_CHARS characters fit


@dataclass(frozen=True, slots=True)
class SummaryItem:
    """One row of :func:`summary_intervals`.

    Attributes
    ----------
    label : str
        What the row is, e.g. ``"2SLS, 95% CI"``.
    pieces : tuple of Interval
        The interval or set, as disjoint pieces (an end may be infinite; no piece: empty).
    assumption : str
        The assumption it rests on, in a few words.
    family : {"exclusion", "direct effect", "partial identification"}
        Colours the row: exclusion assumed exactly, direct effect bounded or given a prior,
        bounds under a weaker restriction.
    kind : {"interval", "set"}
        A confidence or prior interval (thin line with caps) or an identified set / bounds
        (thick bar).
    point : float, optional
        A point estimate to mark.
    """

    label: str
    pieces: tuple[Interval, ...]
    assumption: str
    family: str = "exclusion"
    kind: str = "interval"
    point: float | None = None


# Two rows are the same row when their texts agree and every number agrees within this share of
# the largest finite magnitude in the two rows (the same interval computed twice, e.g. the
# Anderson–Rubin set carried by two results, can differ in the last bits).
ROW_TOLERANCE = 1e-9


def _numbers(item: SummaryItem) -> list[float]:
    values = [v for p in item.pieces for v in (p.low, p.high)]
    return values + ([] if item.point is None else [item.point])


def same_row(a: SummaryItem, b: SummaryItem, tolerance: float = ROW_TOLERANCE) -> bool:
    """Whether two rows draw the same thing (texts equal, numbers within ``tolerance``).

    Examples
    --------
    >>> row = SummaryItem("AR", (Interval(0.1, 0.30000000000000004),), "exact")
    >>> same_row(row, SummaryItem("AR", (Interval(0.1, 0.3),), "exact"))
    True
    >>> same_row(row, SummaryItem("AR", (Interval(0.1, 0.3001),), "exact"))
    False
    """
    if (a.label, a.assumption, a.family, a.kind, len(a.pieces), a.point is None) != (
            b.label, b.assumption, b.family, b.kind, len(b.pieces), b.point is None):
        return False
    xs, ys = _numbers(a), _numbers(b)
    finite = [abs(v) for v in xs + ys if math.isfinite(v)]
    scale = max(finite, default=0.0)
    return all(x == y or (math.isfinite(x) and math.isfinite(y)
                          and abs(x - y) <= tolerance * scale) for x, y in zip(xs, ys))


def distinct_rows(items: Sequence[SummaryItem]) -> list[SummaryItem]:
    """``items`` in order without a row that is :func:`same_row` as an earlier one."""
    kept: list[SummaryItem] = []
    for item in items:
        if not any(same_row(item, k) for k in kept):
            kept.append(item)
    return kept


FAMILY_COLOURS = {"exclusion": INK, "direct effect": BLUE, "partial identification": ORANGE}
FAMILY_WORDS = {"exclusion": "exclusion assumed exact",
                "direct effect": "direct effect bounded / prior",
                "partial identification": "weaker restriction (bounds)"}


# ----------------------------------------------------------------------------- rows per kind
def fit_items(fit, focus: str) -> list[SummaryItem]:
    """The 2SLS interval of ``focus`` and, when the fit has one, its Anderson–Rubin set
    (from a :class:`~sensiv.estimation.iv.IVFit`)."""
    level = pct(fit.confidence_level)
    out = [SummaryItem(f"2SLS, {level} CI", (fit.conf_int(focus),), "exclusion holds exactly",
                       "exclusion", "interval", fit.tsls.value(focus))]
    if fit.ar_set is not None:
        out.append(SummaryItem(f"Anderson–Rubin {level} set", tuple(fit.ar_set),
                               "exclusion holds exactly; robust to a weak first stage",
                               "exclusion", "interval"))
    return out


def sweep_items(sweep) -> list[SummaryItem]:
    """Identified set, union interval and weak-IV-robust set of a
    :class:`~sensiv.sensitivity.bounds.SweepResult` (its fit's rows not included)."""
    level = pct(sweep.confidence_level)
    # minus signs in the numbers only: a label keeps its hyphens ("4-year")
    ranges = ", ".join(f"{labels.name(z)} in [{minus(format_number(b.low))}, "
                       f"{minus(format_number(b.high))}]"
                       for z, b in zip(sweep.instruments, sweep.direct_set))
    words = f"direct effect {ranges}"
    out = [SummaryItem("identified set", (sweep.identified_set,), words, "direct effect",
                       "set"),
           SummaryItem(f"union of {level} intervals", (sweep.union_ci,), words,
                       "direct effect", "interval"),
           *bias_aware_items(sweep.bias_aware, getattr(sweep, "bias_aware_optimal", None),
                             level, words)]
    if sweep.ar_set is not None:
        out.append(SummaryItem(f"weak-IV-robust {level} set", tuple(sweep.ar_set), words,
                               "direct effect", "interval"))
    return out


def bias_aware_items(two_sls, optimal, level: str, words: str) -> list[SummaryItem]:
    """The bias-aware interval centred at 2SLS and, when shorter, the optimally weighted one
    (Armstrong & Kolesár 2021); none when the result has no bias-aware interval."""
    out = []
    if two_sls is not None:
        out.append(SummaryItem(f"bias-aware {level} interval", (two_sls.ci,), words,
                               "direct effect", "interval", two_sls.estimate))
    if (optimal is not None and optimal.traced and optimal.length_ratio is not None
            and optimal.length_ratio < 1):
        out.append(SummaryItem(f"bias-aware {level}, optimal weights", (optimal.interval.ci,),
                               words, "direct effect", "interval", optimal.interval.estimate))
    return out


def prior_items(prior) -> list[SummaryItem]:
    """The prior interval of a :class:`~sensiv.sensitivity.prior.PriorResult` (its fit's rows
    not included)."""
    level = pct(prior.confidence_level)
    laws = "; ".join(f"{labels.name(z)} ~ {p}" for z, p in zip(prior.instruments, prior.priors))
    return [SummaryItem(f"{level} prior interval", (prior.interval,), f"direct effect {laws}",
                        "direct effect", "interval", prior.center)]


def published_items(published) -> list[SummaryItem]:
    """The rows of a :class:`~sensiv.sensitivity.published.PublishedResult`, their assumption
    led by "from printed numbers"."""
    # "from printed numbers" leads the grey line rather than the label: the label shares its
    # line with the numbers and would run into them
    res = published
    level = pct(res.confidence_level)
    b = res.direct_set
    words = minus(f"from printed numbers: direct effect in [{format_number(b.low)}, "
                  f"{format_number(b.high)}]")
    out = [SummaryItem("identified set", (res.identified_set,), words, "direct effect", "set"),
           SummaryItem(f"union of {level} intervals", (res.union_ci,), words, "direct effect",
                       "interval"),
           *bias_aware_items(res.bias_aware, None, level, words),
           SummaryItem(f"weak-IV-robust {level} set", tuple(res.ar_set), words,
                       "direct effect", "interval")]
    if res.prior is not None:
        out.append(SummaryItem(f"{level} prior interval", (res.prior.interval,),
                               f"from printed numbers: direct effect ~ {res.prior.law}",
                               "direct effect", "interval", res.prior.center))
    return out


def correlation_items(bounds) -> list[SummaryItem]:
    """The identified set and, when bootstrapped, its interval from correlation bounds
    (:class:`~sensiv.partial_id.correlation.CorrelationBounds`)."""
    level = pct(bounds.confidence_level)
    words = f"|corr(Z, u)| ≤ {format_number(bounds.max_ratio)}·|corr(X, u)|, same sign"
    out = [SummaryItem("correlation bounds", tuple(bounds.pieces), words,
                       "partial identification", "set")]
    if bounds.ci is not None:
        out.append(SummaryItem(f"correlation bounds, {level} CI", (bounds.ci,), words,
                               "partial identification", "interval"))
    return out


def discrete_items(bounds) -> list[SummaryItem]:
    """The bounds (empty when the model does not fit) and, when bootstrapped, their interval
    from discrete bounds (:class:`~sensiv.partial_id.discrete_results.DiscreteBounds`)."""
    level = pct(bounds.confidence_level)
    words = (f"{labels.name(bounds.table.instrument)} acts directly on at most "
             f"{format_number(bounds.budget)} of units"
             + ("; monotone" if bounds.monotone else ""))
    pieces = (bounds.bounds,) if bounds.bounds is not None else ()
    # A different estimand from 2SLS's complier effect: say so on the row itself.
    out = [SummaryItem("discrete bounds: everyone's average effect", pieces, words, "partial identification", "set")]
    if bounds.ci is not None:
        out.append(SummaryItem(f"discrete bounds, {level} CI", (bounds.ci,), words,
                               "partial identification", "interval"))
    return out


# ----------------------------------------------------------------------------- the figure
def summary_intervals(items: Sequence[SummaryItem], ax=None, *, threshold: float | None = None,
                      xlabel: str | None = None, note: str | None = None):
    """Every analysis of a run as one horizontal interval each, labelled with its assumption.

    Parameters
    ----------
    items : sequence of SummaryItem
        The rows, top to bottom (a repeated row is drawn once); build them with the per-kind
        builders (:func:`fit_items`, :func:`sweep_items`, ...) or, for a run of results,
        :func:`sensiv.analyses.outputs.summary_rows`.
    threshold : float, optional
        Drawn as a vertical line.
    xlabel : str, optional
        By default "effect".
    note : str, optional
        A last caption line (e.g. that the data are invented).

    Returns
    -------
    matplotlib.figure.Figure
    """
    items = list(items)
    wrong = next((item for item in items if not isinstance(item, SummaryItem)), None)
    if wrong is not None:
        raise InputError(f"summary_intervals cannot draw a {type(wrong).__name__}; give "
                         "SummaryItem rows (build them with fit_items, sweep_items, "
                         "prior_items, published_items, correlation_items or discrete_items)")
    rows = list(dict.fromkeys(items))
    if not rows:
        raise InputError("summary_intervals needs at least one SummaryItem")
    with style_context():
        canvas = make_canvas(ax)
        ax = canvas.ax
        row_ends = [e for row in rows for e in ends(row.pieces)]
        row_ends += [row.point for row in rows if row.point is not None]
        xlo, xhi = limits([*row_ends, threshold], pad=0.06)
        if any(not math.isfinite(e) for e in row_ends):
            span = xhi - xlo
            xlo, xhi = xlo - 0.06 * span, xhi + 0.06 * span
        n = len(rows)
        chars = _assumption_chars(canvas)
        wrapped = {row: "\n".join(textwrap.wrap(row.assumption, chars, break_on_hyphens=False))
                   for row in rows if row.assumption}
        extra = max((text.count("\n") for text in wrapped.values()), default=0)
        row_in = SUMMARY_ROW_IN + extra * ROW_LINE_PT / 72.0
        for i, row in enumerate(rows):
            y = n - 1 - i
            colour = FAMILY_COLOURS.get(row.family, INK)
            _summary_row(ax, row, y, colour, xlo, xhi, wrapped.get(row))
        if threshold is not None:
            ax.axvline(threshold, color=GREY, linestyle=(0, (4, 2)), linewidth=0.8, zorder=0,
                       label=f"threshold {format_number(threshold)}")
        ax.set_xlim(xlo, xhi)
        ax.set_ylim(-0.4 * SUMMARY_ROW_IN / row_in,
                    n - 1 + (TOP_ROOM_IN + extra * ROW_LINE_PT / 72.0) / row_in)
        ax.set_yticks([])
        ax.spines["left"].set_visible(False)
        ax.set_xlabel("effect" if xlabel is None else xlabel)
        for family, colour in FAMILY_COLOURS.items():
            if any(r.family == family for r in rows):
                ax.plot([], [], color=colour, linewidth=2.0, label=FAMILY_WORDS[family])
        caption = ["Each row holds only under its own assumption (grey text); a bound that "
                   "excludes the threshold does not prove the instrument valid."]
        return finish(canvas, caption, note=note, axes_in=row_in * n,
                      left_in=SUMMARY_LEFT_IN)


def _assumption_chars(canvas) -> int:
    """Characters of an assumption line that fit the axes' width (own figure: the column)."""
    width_in = (WIDTH_IN - SUMMARY_LEFT_IN - RIGHT_IN if canvas.owned else
                canvas.ax.get_position().width * canvas.fig.get_size_inches()[0])
    return max(20, int(width_in * CAPTION_CHARS / (WIDTH_IN - CAPTION_MARGIN_IN)))


def _summary_row(ax, row: SummaryItem, y: float, colour: str, xlo: float, xhi: float,
                 assumption: str | None = None) -> None:
    """One row: the label and the numbers, the assumption (wrapped) under them, then the bar."""
    numbers = " ∪ ".join(str(p) for p in row.pieces) if row.pieces else "empty"
    row_texts(ax, y, xlo, xhi, row.label, minus(numbers), assumption or row.assumption)
    width = 3.2 if row.kind == "set" else 1.2
    if not row.pieces:
        ax.text(0.5 * (xlo + xhi), y, "empty: the model does not fit the data", ha="center",
                va="center", fontsize=SMALL_PT, color=colour)
        return
    for piece in row.pieces:
        low, high = max(piece.low, xlo), min(piece.high, xhi)
        (line,) = ax.plot([low, high], [y, y], color=colour, linewidth=width,
                          solid_capstyle="butt", zorder=3, clip_on=False)
        line.set_gid(f"row:{row.label}")
        for end, edge, marker in ((piece.low, xlo, "<"), (piece.high, xhi, ">")):
            if math.isinf(end):
                ax.plot([edge], [y], marker=marker, markersize=4, color=colour,
                        linestyle="none", zorder=3, clip_on=False)
            elif row.kind == "interval":
                ax.plot([end], [y], marker="|", markersize=5, color=colour,
                        linestyle="none", zorder=3)
    if row.point is not None:
        ax.plot([row.point], [y], marker="o", markersize=3.2, color=colour,
                markeredgecolor=WHITE, markeredgewidth=0.5, linestyle="none", zorder=4)
