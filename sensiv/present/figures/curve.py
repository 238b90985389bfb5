"""The sensitivity curve: union interval and identified set of the focus coefficient against
the allowed direct effect, with the threshold, the breakdown and the stated range."""

from __future__ import annotations

import math

from sensiv.core import labels
from sensiv.core.results import format_number
from sensiv.present.figures.direct import (DirectAxis, DirectView, direct_axis, direct_view,
                                           share_axis, thin_x_ticks)
from sensiv.present.figures.style import (BLUE, GREY, LIGHT_BLUE, LIGHT_GREY, ORANGE, SMALL_PT,
                                          WHITE, clip, finish, limits, make_canvas, minus, pct,
                                          style_context, text_box)
from sensiv.present.figures.yardstick_marks import draw_marks, marks_for
from sensiv.sensitivity.bounds import SCALE_MAX
from sensiv.sensitivity.breakdown_units import radius


def sensitivity_curve(sweep, ax=None, *, note: str | None = None, yardsticks=None):
    """Union interval and identified set of the focus coefficient against the allowed direct
    effect, with the threshold, the breakdown and the stated range.

    The band is the union of the γ-specific confidence intervals over ``t·Γ``, the dashed
    edges the bias-aware interval (2SLS at the centre of ``t·Γ``), the inner band the
    identified set; when the breakdown lies beyond the stated set the figure runs on to it
    (``sweep.curve_extended``) and shades the stated range.  An unbounded union interval is
    drawn as a hatched band clipped to the axes, with a note.

    Parameters
    ----------
    sweep : sensiv.sensitivity.bounds.SweepResult or sensiv.sensitivity.published.PublishedResult
        A stress test of published numbers is drawn the same way, with a caption that says so.
    ax : matplotlib.axes.Axes, optional
    note : str, optional
        A last caption line (e.g. that the data are invented).
    yardsticks : sensiv.sensitivity.against_yardsticks.YardstickComparison, optional
        Leave-one-out yardsticks of the same data, drawn as marks at their implied scale.

    Returns
    -------
    matplotlib.figure.Figure
    """
    import numpy as np

    marks = [] if yardsticks is None else marks_for(yardsticks, direct_axis(sweep).extent,
                                                    radius(sweep.direct_set))
    sweep = direct_view(sweep)
    with style_context():
        canvas = make_canvas(ax)
        ax = canvas.ax
        axis = direct_axis(sweep)
        curve = sweep.curve_extended if sweep.curve_extended is not None else sweep.curve
        b = sweep.breakdown
        theta = b.threshold
        level = pct(sweep.confidence_level)
        x = np.asarray(curve.scale, float) * axis.extent
        unbounded = not (np.all(np.isfinite(curve.lower)) and np.all(np.isfinite(curve.upper)))
        ylo, yhi = limits([*curve.lower, *curve.upper, *curve.id_lower, *curve.id_upper,
                           *_bias_aware_ends(curve), theta])
        if unbounded:
            span = yhi - ylo
            ylo, yhi = ylo - 0.1 * span, yhi + 0.1 * span
        if sweep.curve_extended is not None:
            ax.axvspan(0.0, axis.extent, facecolor=LIGHT_GREY, edgecolor="none", zorder=0,
                       label="stated range")
        band = ax.fill_between(x, clip(curve.lower, ylo, yhi), clip(curve.upper, ylo, yhi),
                               facecolor=LIGHT_BLUE, edgecolor="none", zorder=1,
                               label=f"union of {level} intervals")
        band.set_gid("union")
        if unbounded:
            band.set_hatch("////")
            band.set_edgecolor(WHITE)
            ax.text(0.5, 0.97, "union interval unbounded\n(first stage not significant)",
                    transform=ax.transAxes, ha="center", va="top", fontsize=SMALL_PT,
                    bbox=text_box(), zorder=6)
        _draw_bias_aware(ax, x, curve, ylo, yhi, level)
        ident = ax.fill_between(x, curve.id_lower, curve.id_upper, facecolor=BLUE,
                                edgecolor=BLUE, linewidth=0.6, zorder=2, label="identified set")
        ident.set_gid("identified")
        ax.axhline(theta, color=GREY, linestyle=(0, (4, 2)), linewidth=0.8, zorder=3,
                   label=f"threshold {format_number(theta)}")
        ax.set_xlim(min(0.0, x[-1]), max(0.0, x[-1]))
        if axis.extent < 0:
            ax.invert_xaxis()
        ax.set_ylim(ylo, yhi)
        if sweep.tidy_layout:
            thin_x_ticks(ax)
        words = _mark_curve_breakdown(ax, sweep, axis, x[-1], unbounded)
        marked = draw_marks(ax, marks, x[-1])
        ax.set_xlabel(axis.label)
        ax.set_ylabel(labels.axis_label("β, ", sweep.focus, sweep.outcome))
        top = share_axis(ax, axis, x[-1])
        caption = [sweep.caption, *([words] if words else []), *([marked] if marked else [])]
        return finish(canvas, caption, note=note, top_axis=top)


def _bias_aware_ends(curve) -> list[float]:
    """The finite bias-aware ends of a curve (none when the curve has no bias-aware band)."""
    if curve.ba_lower is None or curve.ba_upper is None:
        return []
    return [float(v) for v in (*curve.ba_lower, *curve.ba_upper) if math.isfinite(v)]


def _draw_bias_aware(ax, x, curve, ylo: float, yhi: float, level: str) -> None:
    """The bias-aware band (2SLS at the set's centre) as two dashed edges over the union."""
    if not _bias_aware_ends(curve):
        return
    style = {"color": ORANGE, "linestyle": (0, (3, 1.5)), "linewidth": 0.9, "zorder": 2.5}
    (low,) = ax.plot(x, clip(curve.ba_lower, ylo, yhi), label=f"bias-aware {level} interval",
                     **style)
    (high,) = ax.plot(x, clip(curve.ba_upper, ylo, yhi), **style)
    low.set_gid("bias_aware")
    high.set_gid("bias_aware")


def _breakdown_words(sweep: DirectView, axis: DirectAxis) -> str:
    t = sweep.breakdown.scale
    if len(sweep.instruments) == 1:
        return (f"breakdown at x = {minus(format_number(t * axis.extent, 3))}\n"
                f"({format_number(t, 3)} × the stated range)")
    return f"breakdown at t = {format_number(t, 3)}"


def _mark_curve_breakdown(ax, sweep: DirectView, axis: DirectAxis, x_end: float,
                          unbounded: bool) -> str | None:
    """Mark the breakdown; return a caption line when it cannot be shown as a point."""
    b = sweep.breakdown
    theta = format_number(b.threshold)
    if b.scale is None:
        return (f"Breakdown: none within the range — the union interval does not reach "
                f"{theta} within {format_number(SCALE_MAX)} times the stated set.")
    if b.scale == 0.0:
        (marker,) = ax.plot([0.0], [b.threshold], marker="o", markersize=4, color=ORANGE,
                            linestyle="none", zorder=5, clip_on=False, label="breakdown")
        marker.set_gid("breakdown")
        if unbounded:
            return ("Breakdown at zero: the first stage is not significant, so no "
                    "conclusion survives any direct effect.")
        return (f"Breakdown at zero: no conclusion to break, the {pct(sweep.confidence_level)}"
                f" interval at zero direct effect already contains {theta}.")
    xb = b.scale * axis.extent
    ax.axvline(xb, color=ORANGE, linestyle=(0, (1, 1.5)), linewidth=0.9, zorder=4)
    (marker,) = ax.plot([xb], [b.threshold], marker="o", markersize=4, color=ORANGE,
                        linestyle="none", zorder=5, clip_on=False, label="breakdown")
    marker.set_gid("breakdown")
    right_half = abs(xb) > 0.55 * abs(x_end)
    ax.annotate(_breakdown_words(sweep, axis), xy=(xb, b.threshold),
                xytext=(-6 if right_half else 6, 8), textcoords="offset points",
                ha="right" if right_half else "left", va="bottom",
                fontsize=SMALL_PT, color=ORANGE, bbox=text_box(), zorder=6)
    return None
