"""The polytope of a sweep over two instruments: the stated set Γ = {γ : Aγ ≤ b} itself (the
sensitivity curve shows only its scale), its constraint lines, its bounding box and Γ scaled
to the breakdown."""

from __future__ import annotations

from sensiv.core import labels
from sensiv.core.errors import InputError
from sensiv.core.results import format_number
from sensiv.present.figures.direct import sweep_caption
from sensiv.present.figures.style import (BLUE, GREY, MID_GREY, ORANGE, PALE_BLUE, finish,
                                          make_canvas, style_context)

REACH_CAP = 3.0           # draw Γ scaled to the breakdown up to this many times Γ
WINDOW_PAD = 0.15         # share of the drawn extent added around it


def polytope_figure(sweep, ax=None, *, note: str | None = None):
    """The stated polytope of direct effects of two instruments, with its constraints
    ``a′γ = b`` as lines, its bounding box (dotted) and, when the breakdown lies within
    :data:`REACH_CAP` times the set, the polytope scaled to it (orange).

    Raises
    ------
    InputError
        For a sweep over a box, or over other than two instruments.

    Returns
    -------
    matplotlib.figure.Figure
    """
    import numpy as np

    dset = getattr(sweep, "direct_polytope", None)
    if dset is None or len(sweep.instruments) != 2 or dset.vertices is None:
        raise InputError("the polytope figure draws a sweep over a polytope of two "
                         "instruments' direct effects (--direct-polytope with two columns)")
    vertices = _ordered(np.asarray(dset.vertices, float))
    scale = sweep.breakdown.scale
    shown = scale is not None and 0.0 < scale <= REACH_CAP
    reach = max(1.0, scale) if shown else 1.0
    with style_context():
        canvas = make_canvas(ax)
        ax = canvas.ax
        (x0, x1), (y0, y1) = _window(vertices * reach)
        (region,) = ax.fill(vertices[:, 0], vertices[:, 1], facecolor=PALE_BLUE,
                            edgecolor=BLUE, linewidth=1.0, zorder=2, label="stated polytope Γ")
        region.set_gid("polytope")
        for k, (a, b) in enumerate(zip(dset.constraints, dset.rhs)):
            _constraint_line(ax, a, float(b), (x0, x1), (y0, y1), first=k == 0)
        box = dset.bounding_box
        ax.plot([box[0].low, box[0].high, box[0].high, box[0].low, box[0].low],
                [box[1].low, box[1].low, box[1].high, box[1].high, box[1].low],
                color=GREY, linestyle=(0, (1, 1.5)), linewidth=0.8, zorder=3,
                label="bounding box")
        if shown:
            scaled = np.vstack([vertices, vertices[:1]]) * scale
            (line,) = ax.plot(scaled[:, 0], scaled[:, 1], color=ORANGE, linewidth=1.1,
                              zorder=4, label=f"{format_number(scale, 3)} × Γ: breakdown")
            line.set_gid("breakdown")
        ax.plot([0.0], [0.0], marker="+", markersize=6, color=GREY, linestyle="none",
                zorder=5, label="no direct effect")
        ax.set_xlim(x0, x1)
        ax.set_ylim(y0, y1)
        z1, z2 = sweep.instruments
        unit = labels.direct_unit(sweep.outcome, z1)
        ax.set_xlabel(f"direct effect of {labels.name(z1)}" + (f" ({unit})" if unit else ""))
        unit = labels.direct_unit(sweep.outcome, z2)
        ax.set_ylabel(f"direct effect of {labels.name(z2)}" + (f" ({unit})" if unit else ""))
        caption = [sweep_caption(sweep),
                   f"Shaded: the stated polytope ({len(dset.rhs)} constraints a′γ ≤ b, "
                   "dashed); dotted: its bounding box"
                   + ("; orange: the polytope scaled to the breakdown." if shown else ".")]
        return finish(canvas, caption, note=note)


def _ordered(vertices):
    """The vertices in counter-clockwise order around their centre (a convex polygon)."""
    import numpy as np

    centre = vertices.mean(axis=0)
    angle = np.arctan2(vertices[:, 1] - centre[1], vertices[:, 0] - centre[0])
    return vertices[np.argsort(angle, kind="stable")]


def _window(points) -> tuple[tuple[float, float], tuple[float, float]]:
    """Axis ranges around ``points`` and the origin, padded by :data:`WINDOW_PAD`."""
    out = []
    for column in (points[:, 0], points[:, 1]):
        low, high = min(0.0, float(column.min())), max(0.0, float(column.max()))
        pad = WINDOW_PAD * ((high - low) or 1.0)
        out.append((low - pad, high + pad))
    return out[0], out[1]


def _constraint_line(ax, a, b: float, xs, ys, first: bool) -> None:
    """The line ``a[0]·x + a[1]·y = b`` across the window (dashed grey)."""
    import numpy as np

    a0, a1 = float(a[0]), float(a[1])
    if abs(a1) >= abs(a0):
        x = np.array(xs)
        y = (b - a0 * x) / a1
    else:
        y = np.array(ys)
        x = (b - a1 * y) / a0
    (line,) = ax.plot(x, y, color=MID_GREY, linestyle=(0, (4, 2)), linewidth=0.7, zorder=1,
                      label="constraints a′γ = b" if first else None)
    line.set_gid("constraint")
