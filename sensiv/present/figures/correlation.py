"""The correlation-bounds curve: the identified set against the ratio bound r̄, with 2SLS
and OLS, the threshold, the breakdown ratio and the bootstrap interval."""

from __future__ import annotations

from sensiv.core import labels
from sensiv.core.results import format_number
from sensiv.present.figures.marks import X_PAD, draw_breakdown_point, hatch_no_fit, interval_at
from sensiv.present.figures.style import (BLUE, GREY, LIGHT_BLUE, MID_GREY, clip, ends,
                                          finish, limits, make_canvas, pct, style_context)

CLIP_REACH = 2.0          # axis window, in spans of estimates and threshold
ARROW_EVERY = 3           # mark every third unbounded end with an arrow


def informative(r) -> list[float]:
    """The values the y-axis must show: threshold, 2SLS, OLS and the finite ends of the
    interval and of the set at the largest ratio (an unbounded end says nothing about the
    scale, and ends near a pole of the bounds would squeeze the rest into a line)."""
    import math

    values = [r.threshold, r.tsls, r.ols, *(ends([r.ci]) if r.ci else []),
              *(ends(r.curve[-1].pieces) if r.curve else [])]
    return [float(v) for v in values if v is not None and math.isfinite(v)]


def correlation_curve(corr_result, ax=None, *, note: str | None = None):
    """The identified set against the ratio bound r̄ (its pieces drawn separately, open ends
    clipped with arrows), with 2SLS and OLS, the threshold, the breakdown ratio and the
    bootstrap interval at the largest ratio; ratios with an empty set are hatched.

    Returns
    -------
    matplotlib.figure.Figure
    """
    import numpy as np

    r = corr_result
    with style_context():
        canvas = make_canvas(ax)
        ax = canvas.ax
        level = pct(r.confidence_level)
        ratios = np.array([p.max_ratio for p in r.curve])
        empty = np.array([not p.pieces for p in r.curve])
        ci = r.ci
        values = [e for p in r.curve for e in ends(p.pieces)]
        # Near the ratio where an instrument stops bounding the effect the ends run off to
        # infinity; the axis keeps to a window around the estimates and the threshold, and
        # ends beyond it are drawn at its edge.
        anchors = informative(r)
        low, high = min(anchors), max(anchors)
        reach = CLIP_REACH * max(high - low, 1e-12 * max(1.0, abs(high)))
        shown = [v for v in values if low - reach <= v <= high + reach]
        clipped = len(shown) < len(values)
        ylo, yhi = limits([*shown, *anchors])
        if clipped:
            span = yhi - ylo
            ylo, yhi = ylo - 0.06 * span, yhi + 0.06 * span
        hatch_no_fit(ax, ratios, empty, "empty set")
        for lane, first in ((0, True), (-1, False)):
            lo = np.array([np.nan if not p.pieces else p.pieces[lane].low for p in r.curve])
            hi = np.array([np.nan if not p.pieces else p.pieces[lane].high for p in r.curve])
            band = ax.fill_between(ratios, clip(lo, ylo, yhi), clip(hi, ylo, yhi),
                                   where=~empty, facecolor=LIGHT_BLUE, edgecolor=BLUE,
                                   linewidth=0.8, zorder=1,
                                   label="identified set" if first else None)
            band.set_gid("identified")
            for edge, marker, beyond in ((ylo, "v", np.less), (yhi, "^", np.greater)):
                # unbounded ends, and finite ones beyond the window, at the edge with arrows
                open_end = np.flatnonzero(beyond(np.nan_to_num(lo, nan=edge), edge)
                                          | beyond(np.nan_to_num(hi, nan=edge), edge))
                open_end = open_end[::ARROW_EVERY]
                if open_end.size:
                    ax.plot(ratios[open_end], np.full(open_end.size, edge), marker=marker,
                            markersize=3, color=BLUE, linestyle="none", clip_on=False,
                            zorder=3, label="unbounded or clipped end" if first else None)
        ax.axhline(r.ols, color=MID_GREY, linestyle=(0, (1, 1.5)), linewidth=0.8, zorder=2,
                   label=f"OLS {format_number(r.ols, 3)}")
        ax.axhline(r.threshold, color=GREY, linestyle=(0, (4, 2)), linewidth=0.8, zorder=2,
                   label=f"threshold {format_number(r.threshold)}")
        interval_at(ax, r.max_ratio, ci, f"{level} interval", "ci", window=(ylo, yhi))
        x_end = float(ratios[-1]) if ratios[-1] > 0 else 1.0
        ax.set_xlim(0.0, x_end * (1.0 + X_PAD))
        ax.set_ylim(ylo, yhi)
        words = draw_breakdown_point(
            ax, r.breakdown_ratio, r.threshold, x_end, "r̄",
            f"the set does not contain {format_number(r.threshold)} for any r̄ up to 1")
        ax.set_xlabel("ratio bound r̄ on |corr(Z, u)| / |corr(X, u)|")
        ax.set_ylabel(labels.axis_label("", r.treatment, r.outcome))
        sign = {"positive": "positive", "negative": "negative",
                "unknown": "of either sign"}[r.endogeneity]
        caption = [f"Assumption: each instrument is correlated with the error in the same "
                   f"direction as {labels.name(r.treatment)}, at most r̄ times as strongly; "
                   f"endogeneity {sign}. "
                   f"E{labels.effect_words(r.treatment, r.outcome)[1:]}, 2SLS at r̄ = 0; "
                   f"n = {r.n}."
                   + (f" {level} interval: bootstrap (Imbens & Manski) at the largest r̄."
                      if ci is not None else ""), *([words] if words else []),
                   *(["Ends beyond the axis are drawn at its edge; arrows mark unbounded or "
                      "clipped ends."] if clipped else []),
                   *(["Hatched: ratios at which the set is empty (the data contradict the "
                      "restriction)."] if empty.any() else [])]
        return finish(canvas, caption, note=note)
