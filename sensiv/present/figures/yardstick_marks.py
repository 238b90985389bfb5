"""Leave-one-out yardsticks drawn on a sweep's curve: a mark at the x of each yardstick's
implied |direct effect| (``sweep --calibrate`` and a recipe study with a calibration).

A mark is a grey triangle on the top edge of the plot with a thin dotted line; the largest
yardstick of the axis is labelled ("without soil"); marks beyond the end of the curve become a
caption line, so no mark is ever drawn outside the data.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from sensiv.core import labels
from sensiv.core.results import format_number
from sensiv.present.figures.style import GREY, SMALL_PT, minus


@dataclass(frozen=True, slots=True)
class YardstickMark:
    """One yardstick on a curve's x-axis: its name, its x in the axis's units and the direct
    effect it stands for (outcome units, for the caption)."""

    name: str
    x: float
    implied: float


def marks_for(comparison, axis_extent: float, radius: Sequence[float]) -> list[YardstickMark]:
    """The marks of a comparison on a curve axis: with one instrument the x-axis is the direct
    effect itself (its sign that of ``axis_extent``); with several it is the scale t of the
    stated set, so a yardstick of instrument k sits at ``implied / radius[k]``."""
    marks = []
    single = len(comparison.instruments) == 1
    for item in comparison.items:
        k = comparison.instruments.index(item.instrument)
        if single:
            x = item.implied if axis_extent >= 0 else -item.implied
        elif radius[k] > 0:
            x = item.implied / radius[k]
        else:
            continue
        name = (labels.name(item.yardstick) if single else
                f"{labels.name(item.yardstick)} ({labels.name(item.instrument)})")
        marks.append(YardstickMark(name, x, item.implied))
    return marks


def draw_marks(ax, marks: Sequence[YardstickMark], x_end: float) -> str | None:
    """Draw the marks within ``0 … x_end``; return a caption line naming the yardsticks (and
    those beyond the axis), or ``None`` without marks."""
    if not marks:
        return None
    inside = [m for m in marks if abs(m.x) <= abs(x_end)]
    beyond = [m for m in marks if abs(m.x) > abs(x_end)]
    for m in inside:
        ax.axvline(m.x, color=GREY, linestyle=(0, (1, 2)), linewidth=0.7, zorder=3.5)
        (tri,) = ax.plot([m.x], [1.0], marker="v", markersize=5, color=GREY, linestyle="none",
                         transform=ax.get_xaxis_transform(), clip_on=False, zorder=6)
        tri.set_gid("yardstick")
    if inside:
        top = max(inside, key=lambda m: abs(m.x))
        right_half = abs(top.x) > 0.55 * abs(x_end)
        ax.annotate(f"without {top.name}", xy=(top.x, 1.0), xycoords=ax.get_xaxis_transform(),
                    xytext=(-4 if right_half else 4, -10), textcoords="offset points",
                    ha="right" if right_half else "left", va="top", fontsize=SMALL_PT,
                    color=GREY, zorder=6)
    words = "; ".join(f"without {m.name} {minus(format_number(m.implied, 3))}"
                      for m in inside)
    line = "Grey marks: leave-one-out yardsticks (implied |direct effect|)"
    line += f": {words}" if words else ""
    if beyond:
        line += ("; beyond the axis: " + "; ".join(
            f"without {m.name} {minus(format_number(m.implied, 3))}" for m in beyond))
    return line + "."
