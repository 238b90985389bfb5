"""The region names of the breakdown frontier ("β > θ holds", "conclusion fails"), placed
where their whole box fits inside the region, clear of the frontier line.

A label is tried at each height of its region, widest first; it is drawn at the first height
where its box — measured from its characters in points and converted with the size the axes
will have — lies inside the region at every threshold it covers.  A label that fits nowhere is
left out and named in the caption instead, so no label ever sits on the line.
"""

from __future__ import annotations

from dataclasses import dataclass

from sensiv.present.figures.style import (AXES_IN, BLUE, LEFT_IN, ORANGE, PALE_BLUE,
                                          PALE_ORANGE, RIGHT_IN, SMALL_PT, WIDTH_IN)

CHAR_EM = 0.62            # width of a character in ems (DejaVu Sans, generous)
LINE_EM = 1.3             # height of a line in ems, with the box's padding
PAD = 0.03                # share of each axis kept clear around a label
HOLDS = {1: "β > θ holds", -1: "β < θ holds"}
FAILS = "conclusion fails:\ninterval reaches θ"
UNDER_THRESHOLD = 1.8     # a label across the threshold line sits under it (line: zorder 2)


@dataclass(frozen=True)
class Frame:
    """The frontier in data units and the inches the axes will have."""

    y: object             # thresholds (ascending)
    x: object             # frontier direct effect per threshold (clipped to the axis)
    side: object          # +1 below the ordinary interval, −1 above it, 0 inside
    x_end: float
    theta0: float
    width_in: float
    height_in: float


def axes_inches(canvas) -> tuple[float, float]:
    """Width and height the axes will have once the figure is laid out (``finish``)."""
    if canvas.owned:
        return WIDTH_IN - LEFT_IN - RIGHT_IN, AXES_IN
    box = canvas.ax.get_position()
    width, height = canvas.fig.get_size_inches()
    return box.width * width, box.height * height


def preferred_height(frame: Frame) -> float:
    """Where "conclusion fails" goes first: the middle of the thresholds inside the ordinary
    interval (no conclusion there at any direct effect), else the middle of the axis."""
    import numpy as np

    inside = np.flatnonzero(frame.side == 0)
    return float(frame.y[inside[len(inside) // 2]]) if inside.size else float(np.median(frame.y))


def half_size(frame: Frame, text: str) -> tuple[float, float]:
    """Half the width and height of ``text``'s box, in data units."""
    import numpy as np

    lines = text.split("\n")
    width_pt = CHAR_EM * SMALL_PT * max(map(len, lines)) + SMALL_PT
    height_pt = LINE_EM * SMALL_PT * len(lines)
    span_y = float(np.max(frame.y) - np.min(frame.y))
    return (0.5 * width_pt / 72.0 * abs(frame.x_end) / frame.width_in,
            0.5 * height_pt / 72.0 * span_y / frame.height_in)


def _band(frame: Frame, centre: float, half: float, cross: bool = False):
    """The thresholds a label at height ``centre`` covers, with the padding; None when the
    label would leave the axes or (unless ``cross``) touch the examined threshold's line."""
    import numpy as np

    y = frame.y
    low, high = float(np.min(y)), float(np.max(y))
    pad = PAD * (high - low)
    if centre - half - pad < low or centre + half + pad > high:
        return None
    if not cross and abs(centre - frame.theta0) < half + pad:
        return None
    return (y >= centre - half - pad) & (y <= centre + half + pad)


def holds_place(frame: Frame, s: int, cross: bool = False) -> tuple[float, float] | None:
    """Centre of the label of the lobe where ``β > θ`` (``s`` = 1) or ``β < θ`` (−1) holds:
    left-aligned near zero direct effect, its whole box left of the frontier (with ``cross``
    it may lie across the examined threshold's line)."""
    import numpy as np

    half_w, half_h = half_size(frame, HOLDS[s])
    pad_x = PAD * abs(frame.x_end)
    rows = np.flatnonzero(frame.side == s)
    for row in rows[np.argsort(-np.abs(frame.x[rows]), kind="stable")]:
        band = _band(frame, float(frame.y[row]), half_h, cross)
        if band is None or not np.all(frame.side[band] == s):
            continue
        if np.min(np.abs(frame.x[band])) >= 2.0 * (half_w + pad_x):
            return float(np.sign(frame.x_end) * (pad_x + half_w)), float(frame.y[row])
    return None


def fails_place(frame: Frame, preferred: float) -> tuple[float, float] | None:
    """Centre of the "conclusion fails" label: right-aligned at the axis' end, its whole box
    right of the frontier, at the height nearest ``preferred`` where it fits."""
    import numpy as np

    half_w, half_h = half_size(frame, FAILS)
    pad_x = PAD * abs(frame.x_end)
    left = abs(frame.x_end) - 2.0 * (half_w + pad_x)
    for row in np.argsort(np.abs(frame.y - preferred), kind="stable"):
        band = _band(frame, float(frame.y[row]), half_h)
        if band is None or left <= 0.0:
            continue
        if np.all((frame.side[band] == 0) | (np.abs(frame.x[band]) <= left)):
            return (float(np.sign(frame.x_end) * (abs(frame.x_end) - pad_x - half_w)),
                    float(frame.y[row]))
    return None


def label_regions(ax, frame: Frame, preferred: float) -> list[str]:
    """Draw the region names that fit; return those left out (for the caption)."""
    import numpy as np

    missing = []
    for s in (1, -1):
        if not np.any(frame.side == s) or not np.any(frame.x[frame.side == s] != 0.0):
            continue                        # no lobe, or one of zero width
        place, zorder = holds_place(frame, s), 4
        if place is None:   # across the dashed threshold, which is then drawn over it
            place, zorder = holds_place(frame, s, cross=True), UNDER_THRESHOLD
        if place is None:
            missing.append(HOLDS[s])
            continue
        ax.text(*place, HOLDS[s], ha="center", va="center", fontsize=SMALL_PT, color=BLUE,
                zorder=zorder, bbox={"boxstyle": "round,pad=0.15", "facecolor": PALE_BLUE,
                                "edgecolor": "none"}).set_gid(f"region:{s}")
    place = fails_place(frame, preferred)
    if place is None:
        missing.append("conclusion fails")
    else:
        ax.text(*place, FAILS, ha="center", va="center", fontsize=SMALL_PT, color=ORANGE,
                zorder=4, bbox={"boxstyle": "round,pad=0.15", "facecolor": PALE_ORANGE,
                                "edgecolor": "none"}).set_gid("region:0")
    return missing
