"""Marks drawn the same way by several figures: the breakdown point of a bound curve, the
hatching of values where the model does not fit, the interval at the analysed value (discrete
and correlation curves), and the texts above a row (summary and calibration figures)."""

from __future__ import annotations

from sensiv.core.results import format_number
from sensiv.present.figures.style import GREY, INK, MID_GREY, ORANGE, SMALL_PT, WHITE, text_box

X_PAD = 0.04              # room right of a bound curve for the interval drawn at its end
LABEL_ROOM = 0.35         # share of the y-axis a two-line label above a point needs
ROW_LABEL_PT, ROW_ASSUMPTION_PT = 13.0, 4.0   # row label and assumption, points above the bar
ROW_LINE_PT = 8.4         # one more line of a wrapped assumption (7 pt type, 1.2 spacing)


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
    below = label_below(ax, theta)
    ax.annotate(f"breakdown at\n{what} = {format_number(value, 3)}", xy=(value, theta),
                xytext=(-6 if right_half else 6, -8 if below else 8),
                textcoords="offset points", ha="right" if right_half else "left",
                va="top" if below else "bottom", fontsize=SMALL_PT, color=ORANGE,
                bbox=text_box(), zorder=6)
    return None


def label_below(ax, y: float) -> bool:
    """Whether a two-line label at height ``y`` goes under it: when ``y`` lies in the upper
    :data:`LABEL_ROOM` of the y-axis, above it the label would run out of the axes (and the
    figure)."""
    low, high = sorted(ax.get_ylim())
    return high > low and (y - low) / (high - low) > 1.0 - LABEL_ROOM


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


def interval_at(ax, x, interval, label: str, gid: str, window=None) -> None:
    """A vertical interval with caps at ``x`` (nothing when ``interval`` is None).

    With ``window`` (the y-range ``(low, high)`` shown) an end that is unbounded or beyond it
    is drawn at its edge with an arrow instead of a cap, so a one-sided interval stays a
    visible bar rather than a lone cap.
    """
    if interval is None:
        return
    low, high = interval.low, interval.high
    if window is None:
        (line,) = ax.plot([x, x], [low, high], color=INK, linewidth=1.2, marker="_",
                          markersize=6, zorder=5, clip_on=False, label=label)
        line.set_gid(gid)
        return
    bottom, top = window
    shown_low, shown_high = max(low, bottom), min(high, top)
    (line,) = ax.plot([x, x], [shown_low, shown_high], color=INK, linewidth=1.2, zorder=5,
                      clip_on=False, label=label)
    line.set_gid(gid)
    for end, edge, marker in ((low, bottom, "v"), (high, top, "^")):
        open_end = end < bottom if marker == "v" else end > top
        (mark,) = ax.plot([x], [edge if open_end else end], marker=marker if open_end else "_",
                          markersize=4 if open_end else 6, color=INK, linestyle="none",
                          zorder=5, clip_on=False)
        mark.set_gid(f"{gid}-end")


def row_texts(ax, y: float, xlo: float, xhi: float, label: str, numbers: str,
              assumption: str | None) -> None:
    """Above a row: the label on the left, the numbers on the right, and the assumption
    (grey) under them; an assumption of several lines (``\n``) lifts the label by
    :data:`ROW_LINE_PT` per extra line."""
    box = {"boxstyle": "square,pad=0.15", "facecolor": WHITE, "edgecolor": "none"}
    lift = ROW_LABEL_PT + (assumption.count("\n") * ROW_LINE_PT if assumption else 0.0)
    texts = [(xlo, label, "left", INK, lift), (xhi, numbers, "right", INK, lift)]
    if assumption is not None:
        texts.append((xlo, assumption, "left", GREY, ROW_ASSUMPTION_PT))
    for x, text, ha, colour_text, offset in texts:
        ax.annotate(text, xy=(x, y), xytext=(0.0, offset), textcoords="offset points",
                    ha=ha, va="bottom", fontsize=SMALL_PT, color=colour_text, zorder=4,
                    bbox=box, annotation_clip=False, linespacing=1.2)
