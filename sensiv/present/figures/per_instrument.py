"""Figures of the per-instrument sensitivity analyses of a table of associations: the
direct-effect sensitivity curve with its breakdown, and the map over normal priors (μ, τ).

The curve's x-axis is the allowed direct effect of every instrument in the user's unit
(``t`` times the stated range's largest ``|value|``: outcome units, multiples of each
reduced-form SE, or a share of each reduced form), or the scale ``t`` of a polytope.
"""

from __future__ import annotations

import numpy as np

from sensiv.core.results import format_number
from sensiv.present.figures.prior_map import draw_regions
from sensiv.present.figures.style import (BLUE, GREY, LIGHT_BLUE, LIGHT_GREY, ORANGE, SMALL_PT,
                                          finish, limits, make_canvas, minus, pct,
                                          style_context, text_box)
from sensiv.sensitivity.per_instrument_sets import UNIT_WORDS

AXIS_WORDS = {"": "outcome units", "se": "reduced-form SEs", "rf": "share of reduced form"}


def _x_axis(res) -> tuple[float, str]:
    """``(factor, label)``: ``x = t·factor``."""
    unit = res.allowance.radius_in_unit
    if unit is None or unit == 0.0:
        return 1.0, "scale t of the stated direct-effect set (t = 1: the set)"
    return unit, f"bound on every |direct effect| ({AXIS_WORDS[res.allowance.unit]})"


def _caption(res) -> list[str]:
    level = pct(res.confidence_level)
    core = res.core
    shape = ("every instrument's direct effect in " + minus(res.allowance.text)
             + f" ({UNIT_WORDS[res.allowance.unit]}; the grey band), scaled along the axis"
             if res.allowance.is_box else
             "the direct effects in the stated polytope (outcome units), scaled along the axis")
    return [f"Assumption: {shape}; otherwise the {len(res.instruments)} instruments are valid "
            "and independent.",
            f"IVW estimate with {core.order}-order weights held fixed and its {core.se_rule}-"
            f"effect se; union of {level} intervals, bias-aware interval at the midpoint of the "
            "bias range, identified set without sampling error."]


def _mark_breakdown(ax, res, factor: float) -> str | None:
    b = res.breakdown
    theta = format_number(b.threshold)
    if b.scale is None:
        return (f"Breakdown: none — the union interval does not reach {theta} within 1000 "
                "times the set.")
    if b.scale == 0.0:
        return f"Breakdown at zero: the IVW interval already contains {theta}."
    xb = b.scale * factor
    ax.axvline(xb, color=ORANGE, linestyle=(0, (1, 1.5)), linewidth=0.9, zorder=4)
    (marker,) = ax.plot([xb], [b.threshold], marker="o", markersize=4, color=ORANGE,
                        linestyle="none", zorder=5, clip_on=False, label="breakdown")
    marker.set_gid("breakdown")
    ax.annotate(f"breakdown at {format_number(xb, 3)}", xy=(xb, b.threshold),
                xytext=(-6, 8), textcoords="offset points", ha="right", va="bottom",
                fontsize=SMALL_PT, color=ORANGE, bbox=text_box(), zorder=6)
    return None


def per_instrument_curve(res, ax=None, *, note: str | None = None):
    """Union interval, bias-aware interval and identified set of the IVW estimate against the
    allowed direct effect of every instrument, with the threshold and the breakdown.

    Parameters
    ----------
    res : sensiv.sensitivity.per_instrument.DirectEffects
    ax : matplotlib.axes.Axes, optional
    note : str, optional
        A last caption line.

    Returns
    -------
    matplotlib.figure.Figure
    """
    curve = res.curve_extended if res.curve_extended is not None else res.curve
    factor, label = _x_axis(res)
    level = pct(res.confidence_level)
    with style_context():
        canvas = make_canvas(ax)
        ax = canvas.ax
        x = np.asarray(curve.scale, float) * factor
        theta = res.breakdown.threshold
        ylo, yhi = limits([*curve.lower, *curve.upper, theta])
        if res.curve_extended is not None:
            ax.axvspan(0.0, factor, facecolor=LIGHT_GREY, edgecolor="none", zorder=0,
                       label="stated range")
        ax.fill_between(x, curve.lower, curve.upper, facecolor=LIGHT_BLUE, edgecolor="none",
                        zorder=1, label=f"union of {level} intervals").set_gid("union")
        style = {"color": ORANGE, "linestyle": (0, (3, 1.5)), "linewidth": 0.9, "zorder": 2.5}
        (low,) = ax.plot(x, curve.ba_lower, label=f"bias-aware {level} interval", **style)
        (high,) = ax.plot(x, curve.ba_upper, **style)
        low.set_gid("bias_aware")
        high.set_gid("bias_aware")
        ax.fill_between(x, curve.id_lower, curve.id_upper, facecolor=BLUE, edgecolor=BLUE,
                        linewidth=0.6, zorder=2, label="identified set").set_gid("identified")
        ax.axhline(theta, color=GREY, linestyle=(0, (4, 2)), linewidth=0.8, zorder=3,
                   label=f"threshold {format_number(theta)}")
        ax.set_xlim(0.0, x[-1] if x[-1] > 0 else 1.0)
        ax.set_ylim(ylo, yhi)
        words = _mark_breakdown(ax, res, factor)
        ax.set_xlabel(label)
        ax.set_ylabel(f"β, effect of the {res.focus}")
        caption = [*_caption(res), *([words] if words else [])]
        return finish(canvas, caption, note=note)


def per_instrument_prior_map(res, ax=None, *, note: str | None = None):
    """Over normal priors ``α_j ~ N(μ, τ²)`` (in the prior's unit), whether the IVW prior
    interval keeps the conclusion, contains the threshold or reverses it; the analysed prior is
    marked.

    Parameters
    ----------
    res : sensiv.sensitivity.per_instrument_prior.PriorEffects

    Returns
    -------
    matplotlib.figure.Figure
    """
    pm = res.prior_map
    level = pct(res.confidence_level)
    words = UNIT_WORDS[res.prior.unit]
    with style_context():
        canvas = make_canvas(ax)
        ax = canvas.ax
        names = draw_regions(ax, pm, level)
        ax.set_xlabel(f"prior mean μ of each direct effect ({AXIS_WORDS[res.prior.unit]})")
        ax.set_ylabel("prior SD τ of each direct effect")
        caption = [f"Assumption: every instrument's direct effect is normal with the mean and SD "
                   f"on the axes ({words}), independently across instruments and of the "
                   f"sampling errors; closed-form {level} interval of the IVW estimate "
                   f"({res.core.order}-order weights, {res.core.se_rule}-effect se held fixed).",
                   f"Marked: the analysed prior ({minus(res.prior.text())}); μ = 0 is balanced "
                   "pleiotropy."]
        return finish(canvas, caption, note=note,
                      legend_order=["analysed prior", "boundary", names[1], names[0],
                                    names[-1]])
