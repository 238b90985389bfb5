"""Marks drawn the same way by several figures: the breakdown point of a bound curve, the
hatching of values where the model does not fit, the interval at the analysed value (discrete
and correlation curves), and the texts above a row (summary and calibration figures)."""

from __future__ import annotations

from sensiv.core.results import format_number
from sensiv.present.figures.style import GREY, INK, MID_GREY, ORANGE, SMALL_PT, WHITE, text_box

X_PAD = 0.04              # room right of a bound curve for the interval drawn at its end
ROW_LABEL_PT, ROW_ASSUMPTION_PT = 13.0, 4.0   # row label and assumption, points above the bar


def draw_breakdown_point(ax, value, theta, x_end, what: str, never: str) -> str | None:
    """Breakdown of a bound curve: a dotted line and a marker at (value, θ); a caption line
    instead when there is none, when it lies beyond the range, or when it is zero.

    Parameters
    ----------
    value : float or None
        The breakdown on the x-axis (None: there is none).
    theta : float
        The threshold.
    x_end : float
        Right end of the range shown.
    what : str
        The x-axis quantity in the caption, e.g. ``"ε"``.
    never : str
        Why there is no breakdown, for the caption.
    """
    if value is None:
        return f"Breakdown: none — {never}."
    if value > x_end:
        return (f"Breakdown at {what} = {format_number(value, 3)}, beyond the range shown.")
    (marker,) = ax.plot([value], [theta], marker="o", markersize=4, color=ORANGE,
                        linestyle="none", zorder=5, clip_on=False, label="breakdown")
    marker.set_gid("breakdown")
    if value == 0.0:
        return (f"Breakdown at {what} = 0: no conclusion to break, the bounds already contain "
                f"{format_number(theta)} under the exclusion restriction.")
    ax.axvline(value, color=ORANGE, linestyle=(0, (1, 1.5)), linewidth=0.9, zorder=4)
    right_half = value > 0.55 * x_end
    ax.annotate(f"breakdown at\n{what} = {format_number(value, 3)}", xy=(value, theta),
                xytext=(-6 if right_half else 6, 8), textcoords="offset points",
                ha="right" if right_half else "left", va="bottom", fontsize=SMALL_PT,
                color=ORANGE, bbox=text_box(), zorder=6)
    return None


def hatch_no_fit(ax, x, empty, label: str) -> None:
    """Hatch the stretches of ``x`` where ``empty`` (the set is empty / the model does not
    fit), labelled ``label`` in the legend; nothing when no value is empty."""
    import numpy as np

    if not np.any(empty):
        return
    region = ax.fill_between(x, 0, 1, where=empty, transform=ax.get_xaxis_transform(),
                             facecolor=WHITE, edgecolor=MID_GREY, hatch="////", linewidth=0.0,
                             zorder=0, label=label, step="mid")
    region.set_gid("empty")


def interval_at(ax, x, interval, label: str, gid: str) -> None:
    """A vertical interval with caps at ``x`` (nothing when ``interval`` is None)."""
    if interval is None:
        return
    (line,) = ax.plot([x, x], [interval.low, interval.high], color=INK, linewidth=1.2,
                      marker="_", markersize=6, zorder=5, clip_on=False, label=label)
    line.set_gid(gid)


def row_texts(ax, y: float, xlo: float, xhi: float, label: str, numbers: str,
              assumption: str | None) -> None:
    """Above a row: the label on the left, the numbers on the right, and the assumption
    (grey) under them."""
    box = {"boxstyle": "square,pad=0.15", "facecolor": WHITE, "edgecolor": "none"}
    texts = [(xlo, label, "left", INK, ROW_LABEL_PT), (xhi, numbers, "right", INK, ROW_LABEL_PT)]
    if assumption is not None:
        texts.append((xlo, assumption, "left", GREY, ROW_ASSUMPTION_PT))
    for x, text, ha, colour_text, offset in texts:
        ax.annotate(text, xy=(x, y), xytext=(0.0, offset), textcoords="offset points",
                    ha=ha, va="bottom", fontsize=SMALL_PT, color=colour_text, zorder=4,
                    bbox=box, annotation_clip=False)
