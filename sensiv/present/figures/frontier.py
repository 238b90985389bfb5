"""The breakdown frontier: for every threshold θ, the allowed direct effect at which the
conclusion about θ stops holding, with the regions where a conclusion holds or fails."""

from __future__ import annotations

import math

from sensiv.core.errors import InputError
from sensiv.core.results import format_number
from sensiv.present.figures.direct import direct_axis, direct_view, share_axis, thin_x_ticks
from sensiv.present.figures.style import (BLUE, GREY, ORANGE, PALE_BLUE, PALE_ORANGE, SMALL_PT,
                                          finish, make_canvas, style_context)
from sensiv.sensitivity.bounds import SCALE_MAX

FRONTIER_REACH = 2.0      # frontier x-axis: at most this multiple of max(1, breakdown scale)


def breakdown_frontier(sweep, ax=None, *, note: str | None = None):
    """For every threshold θ (y), the allowed direct effect at which the conclusion about θ
    stops holding (x), from ``sweep.frontier``.

    Left of the frontier the union interval over the scaled set stays on one side of θ (the
    conclusion ``β > θ`` below the ordinary interval, ``β < θ`` above it); right of it, the
    interval reaches θ.  Between the ends of the ordinary interval there is no conclusion to
    break.  The threshold of the sweep and its breakdown are marked.  A stress test of
    published numbers (:class:`~sensiv.sensitivity.published.PublishedResult`) is drawn the
    same way.

    Returns
    -------
    matplotlib.figure.Figure
    """
    import numpy as np

    sweep = direct_view(sweep)
    frontier = sweep.frontier
    if frontier is None:
        raise InputError(sweep.recompute)
    with style_context():
        canvas = make_canvas(ax)
        ax = canvas.ax
        axis = direct_axis(sweep)
        theta0 = sweep.breakdown.threshold
        y = np.asarray(frontier.threshold, float)
        t = np.asarray(frontier.scale, float)
        side = np.asarray(frontier.side)
        finite = t[np.isfinite(t)]
        b = sweep.breakdown
        # show every finite breakdown, but let no near-vertical asymptote stretch the axis
        cap = FRONTIER_REACH * max(1.0, b.scale or 0.0)
        reach = min(max([1.0, *(finite.tolist())]), cap)
        x_end = 1.08 * reach * axis.extent
        x = np.where(np.isfinite(t), t * axis.extent, math.inf)
        x = np.sign(x_end) * np.minimum(np.abs(x), abs(x_end))
        ax.fill_betweenx(y, 0.0, x_end, facecolor=PALE_ORANGE, edgecolor="none", zorder=0)
        holds = side != 0
        ax.fill_betweenx(y, 0.0, x, where=holds, facecolor=PALE_BLUE, edgecolor="none",
                         zorder=1, interpolate=False)
        (line,) = ax.plot(x, y, color=BLUE, linewidth=1.2, zorder=3, clip_on=False,
                          label="frontier")
        line.set_gid("frontier")
        clipped = np.abs(t * axis.extent) > abs(x_end)
        ax.axvline(axis.extent, color=GREY, linewidth=0.8, zorder=2, label="stated range")
        ax.axhline(theta0, color=GREY, linestyle=(0, (4, 2)), linewidth=0.8, zorder=2,
                   label=f"examined threshold {format_number(theta0)}")
        words = None
        if b.scale is not None:
            xb = b.scale * axis.extent
            (marker,) = ax.plot([xb], [theta0], marker="o", markersize=4, color=ORANGE,
                                linestyle="none", zorder=5, clip_on=False, label="breakdown")
            marker.set_gid("breakdown")
        else:
            words = (f"Breakdown of the examined threshold: none within "
                     f"{format_number(SCALE_MAX)} times the stated set.")
        ax.set_xlim(0.0, x_end)  # runs right to left when the set's main end is negative
        ax.set_ylim(y.min(), y.max())
        if sweep.tidy_layout:
            thin_x_ticks(ax)
        _label_frontier_regions(ax, y, x, side, x_end, theta0, sweep.tidy_layout)
        ax.set_xlabel(axis.label)
        ax.set_ylabel("threshold θ")
        top = share_axis(ax, axis, x_end)
        if clipped.any():
            words = ((words + " ") if words else "") + (
                f"Where the frontier runs along the right edge, the breakdown lies beyond the "
                f"axis (or beyond {format_number(SCALE_MAX)} times the stated set).")
        caption = [sweep.caption,
                   "Frontier: for each threshold θ, the smallest direct effect at which the "
                   "union interval reaches θ.", *([words] if words else [])]
        return finish(canvas, caption, note=note, top_axis=top)


def _label_frontier_regions(ax, y, x, side, x_end, theta0, tidy: bool = False) -> None:
    """Name the regions where a conclusion holds, at the widest part of each lobe (with
    ``tidy``, not a lobe of zero width, where the conclusion holds at no direct effect)."""
    import numpy as np

    for s, words in ((1, "β > θ holds"), (-1, "β < θ holds")):
        rows = np.flatnonzero(side == s)
        if rows.size < 3 or (tidy and not np.any(x[rows] != 0.0)):
            continue
        span = y.max() - y.min()
        # the widest part of the lobe, off the axes' edges and the examined threshold
        ok = rows[(np.minimum(y[rows] - y.min(), y.max() - y[rows]) > 0.06 * span)
                  & (np.abs(y[rows] - theta0) > 0.06 * span)]
        pick = ok if ok.size else rows
        row = int(pick[np.argmax(np.abs(x[pick]))])
        ax.text(0.5 * x[row], y[row], words, ha="center", va="center", fontsize=SMALL_PT,
                color=BLUE, zorder=4,
                bbox={"boxstyle": "round,pad=0.15", "facecolor": PALE_BLUE,
                      "edgecolor": "none"})
    inside = np.flatnonzero(side == 0)
    y_mid = float(y[inside[len(inside) // 2]]) if inside.size else float(np.median(y))
    # the right-hand region is widest near the ordinary interval; keep off the examined line
    room = np.flatnonzero((np.abs(x) < 0.5 * abs(x_end))
                          & (np.abs(y - theta0) > 0.1 * (y.max() - y.min())))
    if room.size:
        y_mid = float(y[room[np.argmin(np.abs(y[room] - y_mid))]])
    ax.text(0.97 * x_end, y_mid, "conclusion fails:\ninterval reaches θ",
            ha="right", va="center", fontsize=SMALL_PT, color=ORANGE,
            zorder=4, **({"bbox": {"boxstyle": "round,pad=0.15", "facecolor": PALE_ORANGE,
                                   "edgecolor": "none"}} if tidy else {}))
