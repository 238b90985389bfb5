"""The discrete-bounds curve: bounds on the effect against the budget ε for direct effects
of the instrument, with the threshold, the breakdown budget and the analysed budget."""

from __future__ import annotations

from sensiv.core import labels
from sensiv.core.results import format_number
from sensiv.present.figures.marks import X_PAD, draw_breakdown_point, hatch_no_fit, interval_at
from sensiv.present.figures.style import (BLUE, GREY, LIGHT_BLUE, ends, finish, limits,
                                          make_canvas, pct, style_context)


def discrete_curve(discrete_result, ax=None, *, note: str | None = None):
    """Bounds on the effect against the budget ε for direct effects of the instrument (the
    focus contrast), with the threshold, the breakdown budget, the analysed budget and its
    confidence interval; budgets where the model does not fit the data are hatched.

    Returns
    -------
    matplotlib.figure.Figure
    """
    import numpy as np

    r = discrete_result
    t = r.table
    with style_context():
        canvas = make_canvas(ax)
        ax = canvas.ax
        level = pct(r.confidence_level)
        eps = np.array([p.budget for p in r.curve])
        empty = np.array([p.bounds is None for p in r.curve])
        low = np.array([np.nan if p.bounds is None else p.bounds.low for p in r.curve])
        high = np.array([np.nan if p.bounds is None else p.bounds.high for p in r.curve])
        ci = r.ci
        ylo, yhi = limits([*low, *high, r.threshold, *(ends([ci]) if ci else [])])
        hatch_no_fit(ax, eps, empty, "no fit")
        band = ax.fill_between(eps, low, high, where=~empty, facecolor=LIGHT_BLUE,
                               edgecolor=BLUE, linewidth=0.8, zorder=1, label="bounds")
        band.set_gid("bounds")
        ax.axhline(r.threshold, color=GREY, linestyle=(0, (4, 2)), linewidth=0.8, zorder=2,
                   label=f"threshold {format_number(r.threshold)}")
        # the analysed budget as a mark on the x-axis, so no line hides the interval bar
        (mark,) = ax.plot([r.budget], [0.0], marker="^", markersize=5, color=GREY,
                          linestyle="none", transform=ax.get_xaxis_transform(), clip_on=False,
                          zorder=5, label=f"analysed budget {format_number(r.budget)}")
        mark.set_gid("budget")
        interval_at(ax, r.budget, ci, f"{level} interval", "ci")
        x_end = float(eps[-1])
        ax.set_xlim(0.0, x_end * (1.0 + X_PAD))
        ax.set_ylim(ylo, yhi)
        words = draw_breakdown_point(
            ax, r.breakdown_budget, r.threshold, x_end, "ε",
            f"the bounds do not contain {format_number(r.threshold)} for any budget up to 1")
        c = r.focus
        ax.set_xlabel("budget ε: share with a direct effect")
        ax.set_ylabel(labels.axis_label("", t.treatment, t.outcome))
        mono = (f"; {labels.name(t.treatment)} monotone in {labels.name(t.instrument)} "
                f"(defier share ≤ "
                f"{format_number(r.defier_budget)})" if r.monotone else "")
        caption = [f"Assumption: {labels.name(t.instrument)} is randomised and changes "
                   f"{labels.name(t.outcome)} "
                   f"directly for at most a share ε of units{mono}. Effect of "
                   f"{labels.name(t.treatment)} = "
                   f"{format_number(c.level)} vs {format_number(c.base)} on "
                   f"{labels.name(t.outcome)}, "
                   f"n = {t.n}."
                   + (f" {level} interval: bootstrap (Imbens & Manski) at the analysed budget."
                      if ci is not None else ""),
                   "Estimand: the average effect over everyone, Σ_z P̂(z)·E[Y(1,z) − Y(0,z)]"
                   " — not the complier effect that 2SLS estimates under monotonicity.",
                   *([words] if words else []),
                   *(["Hatched: budgets at which the model does not fit the data"
                      + (f" (it fits from ε = {format_number(r.min_budget, 3)})."
                         if r.min_budget is not None else " (none fits).")]
                     if empty.any() else [])]
        return finish(canvas, caption, note=note)
