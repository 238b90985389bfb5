"""The prior map: over normal priors for the direct effect (mean × SD), whether the prior
interval keeps the 2SLS conclusion, contains the threshold or reverses the conclusion, with
the boundary and the analysed prior."""

from __future__ import annotations

from sensiv.core import labels
from sensiv.core.errors import InputError
from sensiv.core.results import format_number
from sensiv.present.figures.style import (BLUE, MID_GREY, MID_ORANGE, ORANGE, PALE_BLUE,
                                          PALE_ORANGE, WHITE, finish, make_canvas, pct,
                                          style_context)


def prior_map(prior_result, ax=None, *, note: str | None = None):
    """Over normal priors (mean × SD of the direct effect), whether the prior interval excludes
    the threshold, from ``prior_result.prior_map``; the boundary is the zero contour of
    ``prior_map.margin`` and the analysed prior is marked.

    Returns
    -------
    matplotlib.figure.Figure
    """
    pm = prior_result.prior_map
    if pm is None:
        raise InputError("this prior result has no prior map; recompute it with "
                         "sensiv.sensitivity.prior.prior_analysis")
    with style_context():
        canvas = make_canvas(ax)
        ax = canvas.ax
        level = pct(prior_result.confidence_level)
        names = draw_regions(ax, pm, level)
        _axis_labels(ax, pm.axis, prior_result)
        laws = "; ".join(f"{labels.name(z)} ~ {p}"
                         for z, p in zip(prior_result.instruments, prior_result.priors))
        caption = [f"Assumption: the direct effect is normal with the mean and SD on the axes, "
                   f"independent of the sampling error of 2SLS; closed-form {level} interval "
                   f"for the effect of {labels.name(prior_result.focus)}, "
                   f"{prior_result.se_type} covariance, "
                   f"n = {prior_result.n}.",
                   f"Marked: the analysed prior ({laws})"
                   + ("" if prior_result.method == "closed-form" else
                      ", placed at its mean and SD") + "."]
        if pm.axis != "direct effect":
            caption.insert(1, f"With several instruments the interval depends on the prior "
                           f"only through the bias a′γ of 2SLS (a: how much the estimate of "
                           f"{labels.name(prior_result.focus)} moves per unit direct effect of "
                           "each "
                           "instrument; γ: the direct effects), so the axes are its prior mean "
                           "and SD.")
        return finish(canvas, caption, note=note,
                      legend_order=["analysed prior", "boundary", names[1], names[0],
                                    names[-1]])


def draw_regions(ax, pm, level: str) -> dict[int, str]:
    """Draw a :class:`~sensiv.sensitivity.prior.PriorMap` into ``ax``: the three regions, the
    boundary, the analysed prior and the zero line, with the axis limits; return the region
    names (legend labels, by code) for the caller's ``legend_order``."""
    import numpy as np

    margin = pm.margin
    theta = format_number(pm.threshold)
    region = pm.region
    # three regions from the two smooth ends (contours of the ends, not of the codes):
    # the ground "contains", above it the side of 2SLS ("kept") and the other ("reversed")
    ax.set_facecolor(PALE_ORANGE)
    above, below = pm.lower - pm.threshold, pm.threshold - pm.upper
    kept, reversed_ = (above, below) if pm.estimate >= pm.threshold else (below, above)
    top = 2.0 * float(max(np.abs(above).max(), np.abs(below).max()) or 1.0)
    for field, colour, gid in ((kept, PALE_BLUE, "kept"), (reversed_, MID_ORANGE,
                                                            "reversed")):
        if field.max() > 0.0:
            ax.contourf(pm.mean, pm.sd, field, levels=[0.0, top], colors=[colour],
                        zorder=0).set_gid(gid)
    if margin.min() < 0.0 < margin.max():
        contour = ax.contour(pm.mean, pm.sd, margin, levels=[0.0], colors=[BLUE],
                             linewidths=1.1, zorder=2)
        contour.set_gid("boundary")
    ax.plot([], [], color=BLUE, linewidth=1.1, label="boundary")
    side = ">" if pm.estimate >= pm.threshold else "<"
    names = region_names(level, theta, side)
    for code, colour in ((1, PALE_BLUE), (0, PALE_ORANGE), (-1, MID_ORANGE)):
        if code in (1, 0) or (region == code).any():
            ax.fill([], [], facecolor=colour, label=names[code])
    (given,) = ax.plot([pm.given[0]], [pm.given[1]], marker="X", markersize=6,
                       color=ORANGE, markeredgecolor=WHITE, markeredgewidth=0.5,
                       linestyle="none", zorder=5, clip_on=False, label="analysed prior")
    given.set_gid("given")
    ax.axvline(0.0, color=MID_GREY, linewidth=0.5, zorder=1)
    from matplotlib.ticker import MaxNLocator

    ax.xaxis.set_major_locator(MaxNLocator(nbins=5))     # no overlapping tick labels
    ax.set_xlim(pm.mean[0], pm.mean[-1])
    ax.set_ylim(pm.sd[0], pm.sd[-1])
    return names


def _axis_labels(ax, axis: str, prior_result) -> None:
    """The prior's mean and SD: of the direct effect (one instrument) or of the bias a′γ."""
    if axis == "direct effect":
        z = labels.name(prior_result.instruments[0])
        ax.set_xlabel(f"prior mean of the direct effect of {z}")
        ax.set_ylabel("prior SD of the direct effect")
    else:
        ax.set_xlabel(f"prior mean of the bias a′γ of the {labels.stem(prior_result.focus)} "
                      "estimate")
        ax.set_ylabel("prior SD of the bias a′γ")


def region_names(level: str, theta: str, side: str) -> dict[int, str]:
    """Legend names of the three regions of the prior map (``side``: the 2SLS conclusion's
    sign, ">" or "<")."""
    other = "<" if side == ">" else ">"
    return {1: f"kept: {level} interval {side} {theta}",
            0: f"{level} interval contains {theta}",
            -1: f"reversed: {level} interval {other} {theta}"}
