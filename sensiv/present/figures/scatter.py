"""The per-instrument scatter: each instrument's reduced form against its first stage, with the
fitted lines of the IVW estimate and the robust yardsticks (drawn from the result only)."""

from __future__ import annotations

from sensiv.core.results import format_number
from sensiv.present.figures.style import (BLUE, GREY, INK, LIGHT_BLUE, MID_GREY, ORANGE,
                                          finish, make_canvas, style_context)

GREEN = "#3A7D44"          # the weighted median line
PURPLE = "#6B4C9A"         # the mode-based line


def per_instrument_scatter(result, ax=None, *, note: str | None = None):
    """Reduced form (y) against first stage (x) of every instrument, oriented so that the first
    stage is positive, with ±1 SE error bars in both directions.

    Lines: IVW through the origin (slope = the IVW estimate), MR-Egger (its intercept and
    slope), and the weighted median and mode-based estimates as lines of their slope through
    the origin.  A direct effect moves an instrument's point vertically off the line of the
    true effect.

    Returns
    -------
    matplotlib.figure.Figure
    """
    import numpy as np

    a = result.associations
    sign = np.sign(a.first_stage)
    bx, by = a.first_stage * sign, a.reduced_form * sign
    with style_context():
        canvas = make_canvas(ax)
        ax = canvas.ax
        ax.errorbar(bx, by, xerr=a.first_stage_se, yerr=a.reduced_form_se, fmt="o",
                    markersize=2.5, color=INK, ecolor=MID_GREY, elinewidth=0.6, capsize=0,
                    zorder=3, label="instruments (±1 se)")
        x_end = float(np.max(bx + a.first_stage_se)) * 1.05
        xs = np.array([0.0, x_end])
        ax.axhline(0.0, color=GREY, linewidth=0.5, zorder=1)
        y = result.yardsticks
        lines = [(f"IVW {format_number(result.ivw.estimate, 3)}", 0.0, result.ivw.estimate,
                  BLUE, "-")]
        if y.egger is not None:
            lines.append((f"MR-Egger {format_number(y.egger.slope, 3)}", y.egger.intercept,
                          y.egger.slope, ORANGE, (0, (5, 2))))
        if y.weighted_median is not None:
            lines.append((f"weighted median {format_number(y.weighted_median.estimate, 3)}", 0.0,
                          y.weighted_median.estimate, GREEN, (0, (2, 1.5))))
        if y.mode is not None:
            lines.append((f"mode {format_number(y.mode.estimate, 3)}", 0.0, y.mode.estimate,
                          PURPLE, (0, (1, 1))))
        for label, intercept, slope, colour, style in lines:
            ax.plot(xs, intercept + slope * xs, color=colour, linestyle=style, linewidth=1.1,
                    zorder=2, label=label)
        ax.set_xlim(0.0, x_end)
        ax.set_xlabel("first-stage association (oriented > 0)")
        ax.set_ylabel("reduced-form association")
        ax.grid(True, color=LIGHT_BLUE, linewidth=0.3, alpha=0.5)
        caption = [f"Per-instrument associations of {a.count} instruments; lines of slope "
                   "β through the origin (IVW, weighted median, mode) and the MR-Egger line "
                   "(its intercept is the average direct effect). Each yardstick holds only "
                   "under its own assumption."]
        order = ["instruments (±1 se)", *(line[0] for line in lines)]
        return finish(canvas, caption, note=note, legend_order=order)
