"""The breakdown frontier: for every threshold θ, the allowed direct effect at which the
conclusion about θ stops holding, with the regions where a conclusion holds or fails."""

from __future__ import annotations

import math

from sensiv.core.errors import InputError
from sensiv.core.results import format_number
from sensiv.present.figures.direct import direct_axis, direct_view, share_axis, thin_x_ticks
from sensiv.present.figures.frontier_labels import (Frame, axes_inches, label_regions,
                                                    preferred_height)
from sensiv.present.figures.style import (BLUE, GREY, ORANGE, PALE_BLUE, PALE_ORANGE,
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
        frame = Frame(y, x, side, x_end, theta0, *axes_inches(canvas))
        missing = label_regions(ax, frame, preferred_height(frame))
        ax.set_xlabel(axis.label)
        ax.set_ylabel("threshold θ")
        top = share_axis(ax, axis, x_end)
        if clipped.any():
            words = ((words + " ") if words else "") + (
                f"Where the frontier runs along the right edge, the breakdown lies beyond the "
                f"axis (or beyond {format_number(SCALE_MAX)} times the stated set).")
        caption = [sweep.caption,
                   "Frontier: for each threshold θ, the smallest direct effect at which the "
                   "union interval reaches θ.", *([words] if words else []),
                   *([f"Blue: a conclusion holds (β > θ below the interval, β < θ above it); "
                      f"orange: it fails."] if missing else [])]
        return finish(canvas, caption, note=note, top_axis=top)

