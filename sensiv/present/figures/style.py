"""The shared look and layout of every figure: palette, sizes, matplotlib style, saving to
deterministic bytes, and the canvas / caption / axis-range helpers that every figure uses.

A figure is drawn either into its own single-column figure (:data:`WIDTH_IN` inches wide, with
a legend row under the plot and a caption that states the assumption) or into the caller's
axes (legend inside them, caption below them); :func:`make_canvas` and :func:`finish` hide
that difference from the figure functions.  matplotlib is imported inside the functions and never
through ``pyplot``, so importing this module touches no display and stays cheap.
"""

from __future__ import annotations

import math
import textwrap
from collections.abc import Sequence
from dataclasses import dataclass

from sensiv.core.errors import InputError

# ----------------------------------------------------------------------------- palette
# A blue/orange pair with neutral greys: the two hues stay apart under the common forms of
# colour-vision deficiency, and every pair that must be told apart also differs in lightness,
# so the figures survive greyscale printing.
INK = "#1A1A1A"
GREY = "#666666"
MID_GREY = "#9A9A9A"
LIGHT_GREY = "#E6E6E6"
BLUE = "#1D4E89"          # identified sets, the frontier, "exact" analyses
LIGHT_BLUE = "#A9C9E8"    # union of confidence intervals
PALE_BLUE = "#E1ECF7"     # region where the conclusion holds
ORANGE = "#C4570B"        # the breakdown point, partial-identification analyses
PALE_ORANGE = "#FBE2CC"   # region where the conclusion fails
MID_ORANGE = "#EFA56F"    # region where the conclusion is reversed
WHITE = "#FFFFFF"

# ----------------------------------------------------------------------------- geometry/type
WIDTH_IN = 3.5            # a journal's single column
LEFT_IN, RIGHT_IN = 0.62, 0.14
TOP_IN, TOP_AXIS_IN = 0.10, 0.40
AXES_IN = 1.85
XLABEL_IN = 0.40
LEGEND_ROW_IN, LEGEND_PAD_IN = 0.15, 0.07
CAPTION_LINE_IN, CAPTION_PAD_IN = 0.125, 0.06
CAPTION_CHARS = 66        # characters per caption line at CAPTION_PT
LEGEND_COLUMNS = 2
BASE_PT, SMALL_PT, CAPTION_PT = 7.5, 7.0, 7.0
DPI = 300
FORMATS = ("png", "pdf", "svg")
Y_PAD = 0.08              # share of the data range added above and below
SUMMARY_ROW_IN = 0.50     # height of one row of the row figures (summary, calibration)
SUMMARY_LEFT_IN = 0.16    # no y-axis labels in the row figures
NBSP = "\u00a0"           # keeps "n = 212" on one caption line
LABEL_LINE_IN = 0.13      # one more line of a wrapped axis label (7.5 pt type)
LABEL_MARGIN_IN = 0.06    # kept clear at each side of a wrapped axis label

STYLE = {
    "font.family": "DejaVu Sans",
    "font.size": BASE_PT,
    "axes.labelsize": BASE_PT,
    "axes.titlesize": BASE_PT,
    "xtick.labelsize": SMALL_PT,
    "ytick.labelsize": SMALL_PT,
    "legend.fontsize": SMALL_PT,
    "axes.linewidth": 0.6,
    "xtick.major.width": 0.6,
    "ytick.major.width": 0.6,
    "xtick.major.size": 2.5,
    "ytick.major.size": 2.5,
    "xtick.major.pad": 2.0,
    "ytick.major.pad": 2.0,
    "axes.labelpad": 2.5,
    "lines.linewidth": 1.0,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.edgecolor": INK,
    "axes.labelcolor": INK,
    "xtick.color": INK,
    "ytick.color": INK,
    "text.color": INK,
    "hatch.linewidth": 0.5,
    "axes.formatter.limits": (-4, 5),
    "axes.formatter.use_mathtext": True,
    "mathtext.default": "regular",
    "pdf.fonttype": 42,
    "ps.fonttype": 42,
    "svg.fonttype": "path",
    "svg.hashsalt": "sensiv",
    "path.simplify": False,
}
METADATA = {"png": {"Software": None},
            "pdf": {"CreationDate": None, "ModDate": None, "Producer": None,
                    "Creator": "sensiv"},
            "svg": {"Date": None, "Creator": "sensiv"}}


# ----------------------------------------------------------------------------- saving
def save_figure(fig, formats: Sequence[str] = ("png",)) -> dict[str, bytes]:
    """The figure as file contents, one entry per format (``png`` at 300 dpi, ``pdf``, ``svg``).

    The bytes carry no timestamp, so the same figure gives the same bytes every time; PDF
    embeds its fonts as TrueType (Type 42), SVG draws text as paths.  Nothing is written.

    Examples
    --------
    >>> from matplotlib.figure import Figure
    >>> files = save_figure(Figure(figsize=(1, 1)), ("png", "svg"))
    >>> files["png"][:4], files["svg"][:5]
    (b'\\x89PNG', b'<?xml')
    """
    from io import BytesIO

    import matplotlib

    formats = tuple(formats)
    unknown = [f for f in formats if f not in FORMATS]
    if unknown or not formats:
        raise InputError(f"figure format(s) {', '.join(map(repr, unknown)) or 'none'} not "
                         f"supported; choose from {', '.join(FORMATS)}")
    out = {}
    with matplotlib.rc_context(STYLE):
        for fmt in dict.fromkeys(formats):
            buffer = BytesIO()
            fig.savefig(buffer, format=fmt, dpi=DPI, metadata=METADATA[fmt])
            out[fmt] = buffer.getvalue()
    return out


def style_context():
    """A context manager in which matplotlib draws with :data:`STYLE` (every figure function
    draws inside one, so the caller's settings are left alone)."""
    import matplotlib

    return matplotlib.rc_context(STYLE)


# ----------------------------------------------------------------------------- layout
@dataclass
class Canvas:
    """Where a figure is drawn: its own single-column figure (``owned``), or the caller's axes.

    Attributes
    ----------
    fig : matplotlib.figure.Figure
    ax : matplotlib.axes.Axes
    owned : bool
        True when the figure was made here, so :func:`finish` may size and lay it out.
    """

    fig: object
    ax: object
    owned: bool


def make_canvas(ax) -> Canvas:
    """The caller's axes (``ax`` given) or a new single-column figure with one axes."""
    if ax is not None:
        return Canvas(ax.figure, ax, False)
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(WIDTH_IN, 3.0))
    FigureCanvasAgg(fig)
    return Canvas(fig, fig.add_axes((0.2, 0.2, 0.7, 0.7)), True)


def wrap(lines: Sequence[str], chars: int = CAPTION_CHARS) -> list[str]:
    """Caption lines wrapped at ``chars`` characters (an empty line stays a line)."""
    out = []
    for line in lines:
        out += textwrap.wrap(line, chars, break_on_hyphens=False) or [""]
    return out


def finish(canvas: Canvas, caption: Sequence[str], *, note: str | None = None,
           top_axis: bool = False, axes_in: float = AXES_IN, legend: bool = True,
           legend_order: Sequence[str] | None = None, left_in: float = LEFT_IN):
    """Size the figure, place the legend row and the caption; return the Figure.

    Parameters
    ----------
    canvas : Canvas
    caption : sequence of str
        Caption paragraphs; ``note`` is added as the last one.
    top_axis : bool
        Leave room above the axes for a secondary x-axis.
    axes_in, left_in : float
        Height of the axes and width left of them, in inches (own figure only).
    legend : bool
        Draw a legend of the labelled artists.
    legend_order : sequence of str, optional
        Legend entries in this order (labels not listed are left out).
    """
    fig, ax = canvas.fig, canvas.ax
    texts = [*caption, *([note] if note else [])]
    handles, labels = ax.get_legend_handles_labels()
    if legend_order is not None:
        order = [labels.index(name) for name in legend_order if name in labels]
        handles, labels = [handles[i] for i in order], [labels[i] for i in order]
    if not canvas.owned:
        # the caller's axes: legend inside on a white ground, caption under the x-label,
        # wrapped to the width of the axes
        if legend and handles:
            ax.legend(handles, labels, loc="best", frameon=True, framealpha=0.9,
                      edgecolor="none", handlelength=1.4, fontsize=SMALL_PT)
        width_in = ax.get_position().width * fig.get_size_inches()[0]
        chars = max(20, int(CAPTION_CHARS * width_in / (WIDTH_IN - 0.2)))
        ax.annotate("\n".join(wrap(texts, chars)), xy=(0.0, 0.0),
                    xycoords=("axes fraction", ax.xaxis.label), xytext=(0.0, -4.0),
                    textcoords="offset points", va="top", ha="left", fontsize=CAPTION_PT,
                    color=GREY, annotation_clip=False)
        return fig
    lines = wrap(texts)
    # long axis labels (a column's label with its unit) wrap instead of running off the figure
    # (a label is centred on the axes, so its room is twice the nearer figure edge's distance)
    centre = left_in + (WIDTH_IN - left_in - RIGHT_IN) / 2
    room = 2 * (min(centre, WIDTH_IN - centre) - LABEL_MARGIN_IN)
    x_extra = fit_label(fig, ax.xaxis.label, room)
    y_extra = fit_label(fig, ax.yaxis.label, axes_in + TOP_IN)
    top_extra = sum(fit_label(fig, child.xaxis.label, room)
                    for child in getattr(ax, "child_axes", ()))
    left_in += y_extra * LABEL_LINE_IN
    rows = math.ceil(len(handles) / LEGEND_COLUMNS) if (legend and handles) else 0
    legend_in = rows * LEGEND_ROW_IN + (LEGEND_PAD_IN if rows else 0.0)
    caption_in = len(lines) * CAPTION_LINE_IN + CAPTION_PAD_IN
    top_in = TOP_IN + (TOP_AXIS_IN if top_axis else 0.0) + top_extra * LABEL_LINE_IN
    xlabel_in = XLABEL_IN + x_extra * LABEL_LINE_IN
    height = top_in + axes_in + xlabel_in + legend_in + caption_in
    fig.set_size_inches(WIDTH_IN, height)
    bottom = xlabel_in + legend_in + caption_in
    ax.set_position((left_in / WIDTH_IN, bottom / height,
                     (WIDTH_IN - left_in - RIGHT_IN) / WIDTH_IN, axes_in / height))
    x0 = 0.06 / WIDTH_IN
    if rows:
        fig.legend(handles, labels, loc="upper left", ncols=LEGEND_COLUMNS, frameon=False,
                   bbox_to_anchor=(x0 - 0.01, (caption_in + legend_in) / height),
                   borderaxespad=0.0, handlelength=1.4, columnspacing=1.2,
                   handletextpad=0.5, labelspacing=0.25)
    fig.text(x0, (caption_in - CAPTION_PAD_IN / 2) / height, "\n".join(lines), va="top",
             ha="left", fontsize=CAPTION_PT, color=GREY, linespacing=1.25)
    return fig


def fit_label(fig, label, room_in: float) -> int:
    """Wrap the axis label ``label`` onto more lines when it is longer than ``room_in``
    inches; return the number of lines added."""
    text = label.get_text()
    if not text or "\n" in text:
        return 0
    width_in = label.get_window_extent(fig.canvas.get_renderer()).width / fig.dpi
    if width_in <= room_in:
        return 0
    lines = textwrap.wrap(text, max(10, int(0.9 * len(text) * room_in / width_in)),
                          break_on_hyphens=False)
    label.set_text("\n".join(lines))
    return len(lines) - 1


# ----------------------------------------------------------------------------- ranges and words
def limits(values, pad: float = Y_PAD) -> tuple[float, float]:
    """Padded range of the finite values (a unit range around a single value)."""
    finite = [float(v) for v in values if v is not None and math.isfinite(v)]
    if not finite:
        return -1.0, 1.0
    low, high = min(finite), max(finite)
    span = high - low
    if not span > 0.0:
        span = max(abs(low), 1e-12) * 0.5
    return low - pad * span, high + pad * span


def clip(values, low: float, high: float):
    """``values`` as a float array clipped to ``[low, high]`` (open ends drawn at the edge)."""
    import numpy as np

    return np.clip(np.asarray(values, float), low, high)


def ends(pieces) -> list[float]:
    """Both ends of every interval in ``pieces``, in order."""
    return [e for p in pieces for e in (p.low, p.high)]


def pct(level: float) -> str:
    """A confidence level as a percentage, e.g. ``0.95`` → ``"95%"``."""
    return f"{100 * level:g}%"


def minus(text: str) -> str:
    """``text`` with the hyphen-minus set as a typographic minus sign."""
    return text.replace("-", "−")


def text_box() -> dict:
    """A white, rounded ground under a text drawn over the data."""
    return {"boxstyle": "round,pad=0.2", "facecolor": WHITE, "edgecolor": "none",
            "alpha": 0.85}
