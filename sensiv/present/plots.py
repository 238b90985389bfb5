"""Figures drawn from result objects (nothing new is computed here).

Every figure function takes a result and an optional matplotlib ``Axes`` and returns the
``Figure``.  Without ``ax`` the figure is built at a journal's single-column width
(:data:`WIDTH_IN` inches) with its own layout: the plot, a legend row under it and a caption
that states the assumption; with ``ax`` the figure is drawn into the caller's axes, the legend
goes inside them and the caption below them.  ``note`` adds a last caption line (e.g. "Invented
demo data").  No function shows a window, writes a file or changes its input; matplotlib is
imported inside the functions and never through ``pyplot``, so no display is touched.

:func:`save_figure` turns a figure into PNG (300 dpi), PDF and SVG bytes that are identical
from run to run (no timestamps; fonts embedded as TrueType in PDF and as paths in SVG).

Axis units
----------
The direct-effect figures put on the x-axis the allowed direct effect ``x = t·e``: ``t`` is the
scale of the stated set Γ and ``e`` its end of largest magnitude (one instrument, outcome
units), or ``x = t`` itself with several instruments.  The top axis converts ``x`` to a share
of the reduced-form coefficient using ``direct_set_rf`` of the result.  They draw a sweep from
data or a stress test of published numbers alike (:class:`~sensiv.sensitivity.published.PublishedResult`:
one instrument, its set a single interval, and the caption says the numbers are printed ones).
The benchmark figure of a calibration puts the implied direct effects in outcome units on the
x-axis and their share of the reduced form on the top axis.
"""

from __future__ import annotations

import math
import textwrap
from collections.abc import Sequence
from dataclasses import dataclass

from sensiv.core.errors import InputError
from sensiv.core.results import Interval, format_number

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
X_PAD = 0.04              # room right of a bound curve for the interval drawn at its end
CLIP_REACH = 2.0          # bound curves: axis window, in spans of estimates and threshold
ARROW_EVERY = 3           # mark every third unbounded end with an arrow
FRONTIER_REACH = 2.0      # frontier x-axis: at most this multiple of max(1, breakdown scale)
SUMMARY_ROW_IN = 0.50     # height of one row of the summary figure ...
ROW_LABEL_PT, ROW_ASSUMPTION_PT = 13.0, 4.0   # ... label and assumption, points above the bar
SUMMARY_LEFT_IN = 0.16    # no y-axis labels in the summary figure
NBSP = "\u00a0"           # keeps "n = 212" on one caption line
X_TICK_BINS = 5           # published figures: at most this many x intervals between ticks

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


# ----------------------------------------------------------------------------- layout helpers
@dataclass
class _Canvas:
    """Where a figure is drawn: its own single-column figure, or the caller's axes."""

    fig: object
    ax: object
    owned: bool


def _canvas(ax) -> _Canvas:
    if ax is not None:
        return _Canvas(ax.figure, ax, False)
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(WIDTH_IN, 3.0))
    FigureCanvasAgg(fig)
    return _Canvas(fig, fig.add_axes((0.2, 0.2, 0.7, 0.7)), True)


def _wrap(lines: Sequence[str], chars: int = CAPTION_CHARS) -> list[str]:
    out = []
    for line in lines:
        out += textwrap.wrap(line, chars, break_on_hyphens=False) or [""]
    return out


def _finish(canvas: _Canvas, caption: Sequence[str], *, note: str | None = None,
            top_axis: bool = False, axes_in: float = AXES_IN, legend: bool = True,
            legend_order: Sequence[str] | None = None, left_in: float = LEFT_IN):
    """Size the figure, place the legend row and the caption; return the Figure."""
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
        ax.annotate("\n".join(_wrap(texts, chars)), xy=(0.0, 0.0),
                    xycoords=("axes fraction", ax.xaxis.label), xytext=(0.0, -4.0),
                    textcoords="offset points", va="top", ha="left", fontsize=CAPTION_PT,
                    color=GREY, annotation_clip=False)
        return fig
    lines = _wrap(texts)
    rows = math.ceil(len(handles) / LEGEND_COLUMNS) if (legend and handles) else 0
    legend_in = rows * LEGEND_ROW_IN + (LEGEND_PAD_IN if rows else 0.0)
    caption_in = len(lines) * CAPTION_LINE_IN + CAPTION_PAD_IN
    top_in = TOP_IN + (TOP_AXIS_IN if top_axis else 0.0)
    height = top_in + axes_in + XLABEL_IN + legend_in + caption_in
    fig.set_size_inches(WIDTH_IN, height)
    bottom = XLABEL_IN + legend_in + caption_in
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


def _limits(values, pad: float = Y_PAD) -> tuple[float, float]:
    """Padded range of the finite values (a unit range around a single value)."""
    finite = [float(v) for v in values if v is not None and math.isfinite(v)]
    if not finite:
        return -1.0, 1.0
    low, high = min(finite), max(finite)
    span = high - low
    if not span > 0.0:
        span = max(abs(low), 1e-12) * 0.5
    return low - pad * span, high + pad * span


def _clip(values, low: float, high: float):
    import numpy as np

    return np.clip(np.asarray(values, float), low, high)


def _pct(level: float) -> str:
    return f"{100 * level:g}%"


def _num(value: float | None, digits: int = 3) -> str:
    return "none" if value is None else format_number(value, digits)


def _text_box():
    return {"boxstyle": "round,pad=0.2", "facecolor": WHITE, "edgecolor": "none",
            "alpha": 0.85}


def _style():
    import matplotlib

    return matplotlib.rc_context(STYLE)


# ----------------------------------------------------------------------------- direct-effect axis
@dataclass(frozen=True)
class _DirectAxis:
    """How the scale ``t`` of the stated set becomes the x-axis of the direct-effect figures."""

    extent: float         # x = t · extent
    label: str            # x-axis label
    share: float | None   # top axis: share of the reduced form at t = 1 (None: not shown)
    share_label: str
    range_text: str       # the stated set in words


def _direct_axis(sweep) -> _DirectAxis:
    rf = sweep.direct_set_rf
    if len(sweep.instruments) == 1:
        z = sweep.instruments[0]
        box = sweep.direct_set[0]
        low, high = box.low, box.high
        extent = high if abs(high) >= abs(low) else low
        rf_end = max(abs(rf[0].low), abs(rf[0].high)) if rf is not None else math.inf
        range_text = f"[{format_number(low)}, {format_number(high)}]"
        if extent == 0.0:
            return _DirectAxis(1.0, f"scale of the direct-effect set of {z} (set is {{0}})",
                               None, "", range_text)
        other = (low if extent == high else high) / extent
        if other == -1.0:
            label = f"bound x on |direct effect| of {z}"
            words = "|direct effect| ≤ x"
        else:
            k = "0" if other == 0.0 else _minus(format_number(other, 3)) + "x"
            words = (f"direct effect in [{k}, x]" if extent > 0 else
                     f"direct effect in [x, {k}]")
            label = f"x: {words} of {z}"
        share = rf_end if math.isfinite(rf_end) else None
        return _DirectAxis(extent, label, share, f"x as a share of |reduced form| of {z}",
                           range_text)
    ends = [max(abs(i.low), abs(i.high)) for i in rf]
    share = max(ends) if all(math.isfinite(e) for e in ends) else None
    range_text = ", ".join(f"{z} in [{format_number(b.low)}, {format_number(b.high)}]"
                           for z, b in zip(sweep.instruments, sweep.direct_set))
    return _DirectAxis(1.0, "scale t of the stated direct-effect set (t = 1: the set)", share,
                       "largest direct effect as a share of its reduced form", range_text)


def _minus(text: str) -> str:
    return text.replace("-", "−")


def _thin_x_ticks(ax) -> None:
    """At most :data:`X_TICK_BINS` intervals between bottom ticks: at single-column width the
    default locator can place labels such as "−0.25" so close that they touch."""
    from matplotlib.ticker import MaxNLocator

    ax.xaxis.set_major_locator(MaxNLocator(nbins=X_TICK_BINS, steps=[1, 2, 2.5, 5, 10]))


def _share_axis(ax, axis: _DirectAxis, x_end: float) -> bool:
    """Top axis in shares of the reduced form; False when it cannot be drawn."""
    if axis.share is None or axis.share == 0.0:
        return False
    from matplotlib.ticker import MaxNLocator, PercentFormatter

    factor = axis.share / abs(axis.extent)
    top_share = abs(x_end) * factor

    def forward(x):
        return abs(x * factor)

    def inverse(s):
        return s / factor * math.copysign(1.0, axis.extent)

    top = ax.secondary_xaxis("top", functions=(forward, inverse))
    top.xaxis.set_major_locator(MaxNLocator(nbins=5, steps=[1, 2, 2.5, 5, 10]))
    top.xaxis.set_major_formatter(PercentFormatter(xmax=1.0, decimals=1 if top_share < 0.04
                                                   else 0))
    top.set_xlabel(axis.share_label, fontsize=SMALL_PT, color=GREY)
    top.tick_params(labelsize=SMALL_PT, colors=GREY)
    return True


def _sweep_caption(sweep) -> str:
    pct = _pct(sweep.confidence_level)
    fixed = (f"Apart from it the instrument is valid; β is the effect of {sweep.focus} on "
             f"{sweep.outcome}; union of {pct} intervals with {sweep.se_type} covariance, "
             f"n = {sweep.n}.")
    if len(sweep.instruments) == 1 and not sweep.polytope:
        b = sweep.direct_set[0]
        return (f"Assumption: the direct effect of {sweep.instruments[0]} on {sweep.outcome} "
                f"(outcome units) lies in the range on the x-axis; stated range "
                f"[{_minus(format_number(b.low))}, {_minus(format_number(b.high))}]. {fixed}")
    shape = "polytope with bounding box" if sweep.polytope else "set"
    ranges = ", ".join(f"{z} in [{_minus(format_number(b.low))}, "
                       f"{_minus(format_number(b.high))}]"
                       for z, b in zip(sweep.instruments, sweep.direct_set))
    return (f"Assumption: the direct effects on {sweep.outcome} (outcome units) lie in t times "
            f"the stated {shape} ({ranges}). {fixed}")


# ----------------------------------------------------------------------------- direct-effect view
@dataclass(frozen=True)
class _DirectView:
    """What the direct-effect figures read, from a sweep or from a published stress test."""

    instruments: tuple[str, ...]
    direct_set: tuple[Interval, ...]
    direct_set_rf: tuple[Interval, ...] | None
    confidence_level: float
    focus: str
    breakdown: object            # sensiv.sensitivity.bounds.Breakdown
    curve: object                # sensiv.sensitivity.bounds.Curve
    curve_extended: object | None
    frontier: object | None      # sensiv.sensitivity.bounds.Frontier
    caption: str
    recompute: str               # how to get a frontier when the result has none
    # Layout fixes: fewer x ticks (labels such as "−0.25" can touch), no region label on a
    # frontier lobe of zero width, a ground under "conclusion fails".
    tidy_layout: bool = True


def _direct_view(result) -> _DirectView:
    from sensiv.sensitivity.bounds import SweepResult
    from sensiv.sensitivity.published import PublishedResult

    if isinstance(result, SweepResult):
        return _DirectView(result.instruments, result.direct_set, result.direct_set_rf,
                           result.confidence_level, result.focus, result.breakdown,
                           result.curve, result.curve_extended, result.frontier,
                           _sweep_caption(result),
                           "this sweep result has no breakdown frontier (it was built without "
                           "sensiv.sensitivity.bounds.analyse); recompute it with sensiv.sensitivity.bounds.sweep")
    if isinstance(result, PublishedResult):
        from sensiv.sensitivity.published_covariance import INSTRUMENT

        rf = (result.direct_set_rf,) if result.direct_set_rf is not None else None
        return _DirectView((INSTRUMENT,), (result.direct_set,), rf, result.confidence_level,
                           result.focus, result.breakdown, result.curve,
                           result.curve_extended, result.frontier, _published_caption(result),
                           "this published result has no breakdown frontier; recompute it "
                           "with sensiv.sensitivity.published.published_analysis")
    raise InputError(f"the direct-effect figures draw a sweep or a published stress test, not a "
                     f"{type(result).__name__}; give a sensiv.sensitivity.bounds.SweepResult or a "
                     "sensiv.sensitivity.published.PublishedResult")


def _covariance_words(method: str) -> str:
    from sensiv.sensitivity import published_covariance as published

    return {published.METHOD_BACKED_OUT: "covariance of reduced form and first stage backed "
                                         "out of the printed se (delta method)",
            published.METHOD_CLIPPED: "covariance of reduced form and first stage backed out "
                                      "of the printed se, its correlation clipped to [−1, 1]",
            published.METHOD_WORST: "covariance of reduced form and first stage not printed: "
                                    "worst case over the admissible correlations"}[method]


def _published_caption(res) -> str:
    b = res.direct_set
    n = res.reported.n
    return (f"Assumption: the direct effect of the instrument on the outcome (outcome units) "
            f"lies in the range on the x-axis; stated range [{_minus(format_number(b.low))}, "
            f"{_minus(format_number(b.high))}] ({_minus(res.range_text)}). Apart from it the "
            f"instrument is valid. From printed numbers only: union of "
            f"{_pct(res.confidence_level)} intervals around the printed estimate "
            f"{_minus(format_number(res.reported.estimate))} (se "
            f"{format_number(res.reported.se)}); "
            f"{_covariance_words(res.covariance.method)}; "
            + (f"n{NBSP}={NBSP}{n}." if n is not None else "n not printed."))


# ----------------------------------------------------------------------------- 1. the curve
def sensitivity_curve(sweep, ax=None, *, note: str | None = None):
    """Union interval and identified set of the focus coefficient against the allowed direct
    effect, with the threshold, the breakdown and the stated range.

    The band is the union of the γ-specific confidence intervals over ``t·Γ``, the inner band
    the identified set; when the breakdown lies beyond the stated set the figure runs on to it
    (``sweep.curve_extended``) and shades the stated range.  An unbounded union interval is
    drawn as a hatched band clipped to the axes, with a note.

    Parameters
    ----------
    sweep : sensiv.sensitivity.bounds.SweepResult or sensiv.sensitivity.published.PublishedResult
        A stress test of published numbers is drawn the same way, with a caption that says so.
    ax : matplotlib.axes.Axes, optional
    note : str, optional
        A last caption line (e.g. that the data are invented).

    Returns
    -------
    matplotlib.figure.Figure
    """
    import numpy as np

    sweep = _direct_view(sweep)
    with _style():
        canvas = _canvas(ax)
        ax = canvas.ax
        axis = _direct_axis(sweep)
        curve = sweep.curve_extended if sweep.curve_extended is not None else sweep.curve
        b = sweep.breakdown
        theta = b.threshold
        pct = _pct(sweep.confidence_level)
        x = np.asarray(curve.scale, float) * axis.extent
        unbounded = not (np.all(np.isfinite(curve.lower)) and np.all(np.isfinite(curve.upper)))
        ylo, yhi = _limits([*curve.lower, *curve.upper, *curve.id_lower, *curve.id_upper,
                            theta])
        if unbounded:
            span = yhi - ylo
            ylo, yhi = ylo - 0.1 * span, yhi + 0.1 * span
        if sweep.curve_extended is not None:
            ax.axvspan(0.0, axis.extent, facecolor=LIGHT_GREY, edgecolor="none", zorder=0,
                       label="stated range")
        band = ax.fill_between(x, _clip(curve.lower, ylo, yhi), _clip(curve.upper, ylo, yhi),
                               facecolor=LIGHT_BLUE, edgecolor="none", zorder=1,
                               label=f"union of {pct} intervals")
        band.set_gid("union")
        if unbounded:
            band.set_hatch("////")
            band.set_edgecolor(WHITE)
            ax.text(0.5, 0.97, "union interval unbounded\n(first stage not significant)",
                    transform=ax.transAxes, ha="center", va="top", fontsize=SMALL_PT,
                    bbox=_text_box(), zorder=6)
        ident = ax.fill_between(x, curve.id_lower, curve.id_upper, facecolor=BLUE,
                                edgecolor=BLUE, linewidth=0.6, zorder=2, label="identified set")
        ident.set_gid("identified")
        ax.axhline(theta, color=GREY, linestyle=(0, (4, 2)), linewidth=0.8, zorder=3,
                   label=f"threshold {format_number(theta)}")
        ax.set_xlim(min(0.0, x[-1]), max(0.0, x[-1]))
        if axis.extent < 0:
            ax.invert_xaxis()
        ax.set_ylim(ylo, yhi)
        if sweep.tidy_layout:
            _thin_x_ticks(ax)
        words = _mark_curve_breakdown(ax, sweep, axis, x[-1], unbounded)
        ax.set_xlabel(axis.label)
        ax.set_ylabel(f"β, effect of {sweep.focus}")
        top = _share_axis(ax, axis, x[-1])
        caption = [sweep.caption, *([words] if words else [])]
        return _finish(canvas, caption, note=note, top_axis=top)


def _breakdown_words(sweep, axis: _DirectAxis) -> str:
    t = sweep.breakdown.scale
    if len(sweep.instruments) == 1:
        return (f"breakdown at x = {_minus(format_number(t * axis.extent, 3))}\n"
                f"({format_number(t, 3)} × the stated range)")
    return f"breakdown at t = {format_number(t, 3)}"


def _mark_curve_breakdown(ax, sweep, axis: _DirectAxis, x_end: float,
                          unbounded: bool) -> str | None:
    """Mark the breakdown; return a caption line when it cannot be shown as a point."""
    b = sweep.breakdown
    theta = format_number(b.threshold)
    if b.scale is None:
        from sensiv.sensitivity.bounds import SCALE_MAX

        return (f"Breakdown: none within the range — the union interval does not reach "
                f"{theta} within {format_number(SCALE_MAX)} times the stated set.")
    if b.scale == 0.0:
        (marker,) = ax.plot([0.0], [b.threshold], marker="o", markersize=4, color=ORANGE,
                            linestyle="none", zorder=5, clip_on=False, label="breakdown")
        marker.set_gid("breakdown")
        if unbounded:
            return ("Breakdown at zero: the first stage is not significant, so no "
                    "conclusion survives any direct effect.")
        return (f"Breakdown at zero: no conclusion to break, the {_pct(sweep.confidence_level)}"
                f" interval at zero direct effect already contains {theta}.")
    xb = b.scale * axis.extent
    ax.axvline(xb, color=ORANGE, linestyle=(0, (1, 1.5)), linewidth=0.9, zorder=4)
    (marker,) = ax.plot([xb], [b.threshold], marker="o", markersize=4, color=ORANGE,
                        linestyle="none", zorder=5, clip_on=False, label="breakdown")
    marker.set_gid("breakdown")
    right_half = abs(xb) > 0.55 * abs(x_end)
    ax.annotate(_breakdown_words(sweep, axis), xy=(xb, b.threshold),
                xytext=(-6 if right_half else 6, 8), textcoords="offset points",
                ha="right" if right_half else "left", va="bottom",
                fontsize=SMALL_PT, color=ORANGE, bbox=_text_box(), zorder=6)
    return None


# ----------------------------------------------------------------------------- 2. frontier
def breakdown_frontier(sweep, ax=None, *, note: str | None = None):
    """For every threshold θ (y), the allowed direct effect at which the conclusion about θ
    stops holding (x), from ``sweep.frontier``.

    Left of the frontier the union interval over the scaled set stays on one side of θ (the
    conclusion ``β > θ`` below the ordinary interval, ``β < θ`` above it); right of it, the
    interval reaches θ.  Between the ends of the ordinary interval there is no conclusion to
    break.  The threshold of the sweep and its breakdown are marked.  A stress test of
    published numbers (:class:`~sensiv.sensitivity.published.PublishedResult`) is drawn the same way.

    Returns
    -------
    matplotlib.figure.Figure
    """
    import numpy as np

    sweep = _direct_view(sweep)
    frontier = sweep.frontier
    if frontier is None:
        raise InputError(sweep.recompute)
    with _style():
        canvas = _canvas(ax)
        ax = canvas.ax
        axis = _direct_axis(sweep)
        theta0 = sweep.breakdown.threshold
        y = np.asarray(frontier.threshold, float)
        t = np.asarray(frontier.scale, float)
        side = np.asarray(frontier.side)
        finite = t[np.isfinite(t)]
        b = sweep.breakdown
        # show every finite breakdown, but let no near-vertical asymptote stretch the axis
        cap = FRONTIER_REACH * max(1.0, b.scale or 0.0)
        reach = min(max([1.0, *(finite.tolist())]), cap)
        x_end = 1.08 * reach * axis.extent
        x = np.where(np.isfinite(t), t * axis.extent, math.inf)
        x = np.sign(x_end) * np.minimum(np.abs(x), abs(x_end))
        ax.fill_betweenx(y, 0.0, x_end, facecolor=PALE_ORANGE, edgecolor="none", zorder=0)
        holds = side != 0
        ax.fill_betweenx(y, 0.0, x, where=holds, facecolor=PALE_BLUE, edgecolor="none",
                         zorder=1, interpolate=False)
        (line,) = ax.plot(x, y, color=BLUE, linewidth=1.2, zorder=3, clip_on=False,
                          label="frontier")
        line.set_gid("frontier")
        clipped = np.abs(t * axis.extent) > abs(x_end)
        ax.axvline(axis.extent, color=GREY, linewidth=0.8, zorder=2, label="stated range")
        ax.axhline(theta0, color=GREY, linestyle=(0, (4, 2)), linewidth=0.8, zorder=2,
                   label=f"examined threshold {format_number(theta0)}")
        words = None
        if b.scale is not None:
            xb = b.scale * axis.extent
            (marker,) = ax.plot([xb], [theta0], marker="o", markersize=4, color=ORANGE,
                                linestyle="none", zorder=5, clip_on=False, label="breakdown")
            marker.set_gid("breakdown")
        else:
            from sensiv.sensitivity.bounds import SCALE_MAX

            words = (f"Breakdown of the examined threshold: none within "
                     f"{format_number(SCALE_MAX)} times the stated set.")
        ax.set_xlim(0.0, x_end)  # runs right to left when the set's main end is negative
        ax.set_ylim(y.min(), y.max())
        if sweep.tidy_layout:
            _thin_x_ticks(ax)
        _label_frontier_regions(ax, y, x, side, x_end, theta0, sweep.tidy_layout)
        ax.set_xlabel(axis.label)
        ax.set_ylabel("threshold θ")
        top = _share_axis(ax, axis, x_end)
        if clipped.any():
            from sensiv.sensitivity.bounds import SCALE_MAX

            words = ((words + " ") if words else "") + (
                f"Where the frontier runs along the right edge, the breakdown lies beyond the "
                f"axis (or beyond {format_number(SCALE_MAX)} times the stated set).")
        caption = [sweep.caption,
                   "Frontier: for each threshold θ, the smallest direct effect at which the "
                   "union interval reaches θ.", *([words] if words else [])]
        return _finish(canvas, caption, note=note, top_axis=top)


def _label_frontier_regions(ax, y, x, side, x_end, theta0, tidy: bool = False) -> None:
    """Name the regions where a conclusion holds, at the widest part of each lobe (with
    ``tidy``, not a lobe of zero width, where the conclusion holds at no direct effect)."""
    import numpy as np

    for s, words in ((1, "β > θ holds"), (-1, "β < θ holds")):
        rows = np.flatnonzero(side == s)
        if rows.size < 3 or (tidy and not np.any(x[rows] != 0.0)):
            continue
        span = y.max() - y.min()
        # the widest part of the lobe, off the axes' edges and the examined threshold
        ok = rows[(np.minimum(y[rows] - y.min(), y.max() - y[rows]) > 0.06 * span)
                  & (np.abs(y[rows] - theta0) > 0.06 * span)]
        pick = ok if ok.size else rows
        row = int(pick[np.argmax(np.abs(x[pick]))])
        ax.text(0.5 * x[row], y[row], words, ha="center", va="center", fontsize=SMALL_PT,
                color=BLUE, zorder=4,
                bbox={"boxstyle": "round,pad=0.15", "facecolor": PALE_BLUE,
                      "edgecolor": "none"})
    inside = np.flatnonzero(side == 0)
    y_mid = float(y[inside[len(inside) // 2]]) if inside.size else float(np.median(y))
    # the right-hand region is widest near the ordinary interval; keep off the examined line
    room = np.flatnonzero((np.abs(x) < 0.5 * abs(x_end))
                          & (np.abs(y - theta0) > 0.1 * (y.max() - y.min())))
    if room.size:
        y_mid = float(y[room[np.argmin(np.abs(y[room] - y_mid))]])
    ax.text(0.97 * x_end, y_mid, "conclusion fails:\ninterval reaches θ",
            ha="right", va="center", fontsize=SMALL_PT, color=ORANGE,
            zorder=4, **({"bbox": {"boxstyle": "round,pad=0.15", "facecolor": PALE_ORANGE,
                                   "edgecolor": "none"}} if tidy else {}))


# ----------------------------------------------------------------------------- 3. prior map
def prior_map(prior_result, ax=None, *, note: str | None = None):
    """Over normal priors (mean × SD of the direct effect), whether the prior interval excludes
    the threshold, from ``prior_result.prior_map``; the boundary is the zero contour of
    ``prior_map.margin`` and the analysed prior is marked.

    Returns
    -------
    matplotlib.figure.Figure
    """
    import numpy as np

    pm = prior_result.prior_map
    if pm is None:
        raise InputError("this prior result has no prior map; recompute it with "
                         "sensiv.sensitivity.prior.prior_analysis")
    with _style():
        canvas = _canvas(ax)
        ax = canvas.ax
        margin = pm.margin
        theta = format_number(pm.threshold)
        pct = _pct(prior_result.confidence_level)
        span = float(np.abs(margin).max()) or 1.0
        ax.contourf(pm.mean, pm.sd, margin, levels=[-2 * span, 0.0, 2 * span],
                    colors=[PALE_ORANGE, PALE_BLUE], zorder=0)
        if margin.min() < 0.0 < margin.max():
            contour = ax.contour(pm.mean, pm.sd, margin, levels=[0.0], colors=[BLUE],
                                 linewidths=1.1, zorder=2)
            contour.set_gid("boundary")
        ax.plot([], [], color=BLUE, linewidth=1.1, label="boundary")
        ax.fill([], [], facecolor=PALE_BLUE, label=f"{pct} interval excludes {theta}")
        ax.fill([], [], facecolor=PALE_ORANGE, label=f"{pct} interval contains {theta}")
        (given,) = ax.plot([pm.given[0]], [pm.given[1]], marker="X", markersize=6,
                           color=ORANGE, markeredgecolor=WHITE, markeredgewidth=0.5,
                           linestyle="none", zorder=5, clip_on=False, label="analysed prior")
        given.set_gid("given")
        ax.axvline(0.0, color=MID_GREY, linewidth=0.5, zorder=1)
        ax.set_xlim(pm.mean[0], pm.mean[-1])
        ax.set_ylim(pm.sd[0], pm.sd[-1])
        if pm.axis == "direct effect":
            z = prior_result.instruments[0]
            ax.set_xlabel(f"prior mean of the direct effect of {z}")
            ax.set_ylabel("prior SD of the direct effect")
        else:
            ax.set_xlabel(f"prior mean of the bias a′γ of the {prior_result.focus} estimate")
            ax.set_ylabel("prior SD of the bias a′γ")
        laws = "; ".join(f"{z} ~ {p}" for z, p in zip(prior_result.instruments,
                                                      prior_result.priors))
        caption = [f"Assumption: the direct effect is normal with the mean and SD on the axes, "
                   f"independent of the sampling error of 2SLS; closed-form {pct} interval "
                   f"for the effect of {prior_result.focus}, {prior_result.se_type} covariance, "
                   f"n = {prior_result.n}.",
                   f"Marked: the analysed prior ({laws})"
                   + ("" if prior_result.method == "closed-form" else
                      ", placed at its mean and SD") + "."]
        return _finish(canvas, caption, note=note,
                       legend_order=["analysed prior", "boundary",
                                     f"{pct} interval excludes {theta}",
                                     f"{pct} interval contains {theta}"])


# ----------------------------------------------------------------------------- 4. bound curves
def _ends(pieces):
    return [e for p in pieces for e in (p.low, p.high)]


def _draw_breakdown_point(ax, value, theta, x_end, what: str, never: str) -> str | None:
    """Breakdown of a bound curve: a dotted line and a marker at (value, θ); a caption line
    instead when there is none, when it lies beyond the range, or when it is zero."""
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
                color=ORANGE, bbox=_text_box(), zorder=6)
    return None


def _no_fit(ax, x, empty, label: str) -> None:
    """Hatch the stretches of x where the set is empty / the model does not fit."""
    import numpy as np

    if not np.any(empty):
        return
    region = ax.fill_between(x, 0, 1, where=empty, transform=ax.get_xaxis_transform(),
                             facecolor=WHITE, edgecolor=MID_GREY, hatch="////", linewidth=0.0,
                             zorder=0, label=label, step="mid")
    region.set_gid("empty")


def _interval_at(ax, x, interval, label: str, gid: str) -> None:
    if interval is None:
        return
    (line,) = ax.plot([x, x], [interval.low, interval.high], color=INK, linewidth=1.2,
                      marker="_", markersize=6, zorder=5, clip_on=False, label=label)
    line.set_gid(gid)


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
    with _style():
        canvas = _canvas(ax)
        ax = canvas.ax
        pct = _pct(r.confidence_level)
        eps = np.array([p.budget for p in r.curve])
        empty = np.array([p.bounds is None for p in r.curve])
        low = np.array([np.nan if p.bounds is None else p.bounds.low for p in r.curve])
        high = np.array([np.nan if p.bounds is None else p.bounds.high for p in r.curve])
        ci = r.ci
        ylo, yhi = _limits([*low, *high, r.threshold, *(_ends([ci]) if ci else [])])
        _no_fit(ax, eps, empty, "no fit")
        band = ax.fill_between(eps, low, high, where=~empty, facecolor=LIGHT_BLUE,
                               edgecolor=BLUE, linewidth=0.8, zorder=1, label="bounds")
        band.set_gid("bounds")
        ax.axhline(r.threshold, color=GREY, linestyle=(0, (4, 2)), linewidth=0.8, zorder=2,
                   label=f"threshold {format_number(r.threshold)}")
        ax.axvline(r.budget, color=GREY, linewidth=0.8, zorder=2,
                   label=f"analysed budget {format_number(r.budget)}")
        _interval_at(ax, r.budget, ci, f"{pct} interval", "ci")
        x_end = float(eps[-1])
        ax.set_xlim(0.0, x_end * (1.0 + X_PAD))
        ax.set_ylim(ylo, yhi)
        words = _draw_breakdown_point(
            ax, r.breakdown_budget, r.threshold, x_end, "ε",
            f"the bounds do not contain {format_number(r.threshold)} for any budget up to 1")
        c = r.focus
        ax.set_xlabel("budget ε: share with a direct effect")
        ax.set_ylabel(f"effect of {t.treatment}")
        mono = (f"; {t.treatment} monotone in {t.instrument} (defier share ≤ "
                f"{format_number(r.defier_budget)})" if r.monotone else "")
        caption = [f"Assumption: {t.instrument} is randomised and changes {t.outcome} "
                   f"directly for at most a share ε of units{mono}. Effect of {t.treatment} = "
                   f"{format_number(c.level)} vs {format_number(c.base)} on {t.outcome}, "
                   f"n = {t.n}."
                   + (f" {pct} interval: bootstrap (Imbens & Manski) at the analysed budget."
                      if ci is not None else ""),
                   *([words] if words else []),
                   *(["Hatched: budgets at which the model does not fit the data"
                      + (f" (it fits from ε = {format_number(r.min_budget, 3)})."
                         if r.min_budget is not None else " (none fits).")]
                     if empty.any() else [])]
        return _finish(canvas, caption, note=note)


def correlation_curve(corr_result, ax=None, *, note: str | None = None):
    """The identified set against the ratio bound r̄ (its pieces drawn separately, open ends
    clipped with arrows), with 2SLS and OLS, the threshold, the breakdown ratio and the
    bootstrap interval at the largest ratio; ratios with an empty set are hatched.

    Returns
    -------
    matplotlib.figure.Figure
    """
    import numpy as np

    r = corr_result
    with _style():
        canvas = _canvas(ax)
        ax = canvas.ax
        pct = _pct(r.confidence_level)
        ratios = np.array([p.max_ratio for p in r.curve])
        empty = np.array([not p.pieces for p in r.curve])
        ci = r.ci
        values = [e for p in r.curve for e in _ends(p.pieces)]
        # Near the ratio where an instrument stops bounding the effect the ends run off to
        # infinity; the axis keeps to a window around the estimates and the threshold, and
        # ends beyond it are drawn at its edge.
        anchors = [r.threshold, r.tsls, r.ols, *(_ends([ci]) if ci else [])]
        low, high = min(anchors), max(anchors)
        reach = CLIP_REACH * max(high - low, 1e-12 * max(1.0, abs(high)))
        shown = [v for v in values if low - reach <= v <= high + reach]
        clipped = len(shown) < len(values)
        ylo, yhi = _limits([*shown, *anchors])
        if clipped:
            span = yhi - ylo
            ylo, yhi = ylo - 0.06 * span, yhi + 0.06 * span
        _no_fit(ax, ratios, empty, "empty set")
        for lane, first in ((0, True), (-1, False)):
            lo = np.array([np.nan if not p.pieces else p.pieces[lane].low for p in r.curve])
            hi = np.array([np.nan if not p.pieces else p.pieces[lane].high for p in r.curve])
            band = ax.fill_between(ratios, _clip(lo, ylo, yhi), _clip(hi, ylo, yhi),
                                   where=~empty, facecolor=LIGHT_BLUE, edgecolor=BLUE,
                                   linewidth=0.8, zorder=1,
                                   label="identified set" if first else None)
            band.set_gid("identified")
            for ends, edge, marker in ((lo, ylo, "v"), (hi, yhi, "^")):
                open_end = np.flatnonzero(np.isinf(ends))[::ARROW_EVERY]
                if open_end.size:
                    ax.plot(ratios[open_end], np.full(open_end.size, edge), marker=marker,
                            markersize=3, color=BLUE, linestyle="none", clip_on=False,
                            zorder=3, label="unbounded end" if first else None)
        ax.axhline(r.ols, color=MID_GREY, linestyle=(0, (1, 1.5)), linewidth=0.8, zorder=2,
                   label=f"OLS {format_number(r.ols, 3)}")
        ax.axhline(r.threshold, color=GREY, linestyle=(0, (4, 2)), linewidth=0.8, zorder=2,
                   label=f"threshold {format_number(r.threshold)}")
        _interval_at(ax, r.max_ratio, ci, f"{pct} interval", "ci")
        x_end = float(ratios[-1]) if ratios[-1] > 0 else 1.0
        ax.set_xlim(0.0, x_end * (1.0 + X_PAD))
        ax.set_ylim(ylo, yhi)
        words = _draw_breakdown_point(
            ax, r.breakdown_ratio, r.threshold, x_end, "r̄",
            f"the set does not contain {format_number(r.threshold)} for any r̄ up to 1")
        ax.set_xlabel("ratio bound r̄ on |corr(Z, u)| / |corr(X, u)|")
        ax.set_ylabel(f"effect of {r.treatment}")
        sign = {"positive": "positive", "negative": "negative",
                "unknown": "of either sign"}[r.endogeneity]
        caption = [f"Assumption: each instrument is correlated with the error in the same "
                   f"direction as {r.treatment}, at most r̄ times as strongly; endogeneity "
                   f"{sign}. Effect of {r.treatment} on {r.outcome}, 2SLS at r̄ = 0; "
                   f"n = {r.n}."
                   + (f" {pct} interval: bootstrap (Imbens & Manski) at the largest r̄."
                      if ci is not None else ""), *([words] if words else []),
                   *(["Ends beyond the axis are drawn at its edge; arrows mark unbounded "
                      "ends."] if clipped else []),
                   *(["Hatched: ratios at which the set is empty (the data contradict the "
                      "restriction)."] if empty.any() else [])]
        return _finish(canvas, caption, note=note)


# ----------------------------------------------------------------------------- 5. summary
@dataclass(frozen=True, slots=True)
class SummaryItem:
    """One row of :func:`summary_intervals`.

    Attributes
    ----------
    label : str
        What the row is, e.g. ``"2SLS, 95% CI"``.
    pieces : tuple of Interval
        The interval or set, as disjoint pieces (an end may be infinite; no piece: empty).
    assumption : str
        The assumption it rests on, in a few words.
    family : {"exclusion", "direct effect", "partial identification"}
        Colours the row: exclusion assumed exactly, direct effect bounded or given a prior,
        bounds under a weaker restriction.
    kind : {"interval", "set"}
        A confidence or prior interval (thin line with caps) or an identified set / bounds
        (thick bar).
    point : float, optional
        A point estimate to mark.
    """

    label: str
    pieces: tuple[Interval, ...]
    assumption: str
    family: str = "exclusion"
    kind: str = "interval"
    point: float | None = None


FAMILY_COLOURS = {"exclusion": INK, "direct effect": BLUE, "partial identification": ORANGE}


def summary_items(*results) -> list[SummaryItem]:
    """Rows for :func:`summary_intervals` from result objects, in the order given.

    Accepts :class:`~sensiv.estimation.iv.IVFit`, :class:`~sensiv.sensitivity.bounds.SweepResult`,
    :class:`~sensiv.sensitivity.prior.PriorResult`, correlation bounds, discrete bounds and
    :class:`~sensiv.sensitivity.published.PublishedResult` (its rows labelled "from printed numbers").  The
    2SLS and Anderson–Rubin rows come once, from the first fit found (a sweep or a prior result
    carries its fit).  A :class:`~sensiv.sensitivity.calibrate.Calibration` bounds no effect of the
    treatment and adds no row.
    """
    from sensiv.sensitivity.bounds import SweepResult
    from sensiv.sensitivity.calibrate import Calibration
    from sensiv.estimation.iv import IVFit
    from sensiv.partial_id.correlation_results import CorrelationBounds
    from sensiv.partial_id.discrete_results import DiscreteBounds
    from sensiv.sensitivity.prior import PriorResult
    from sensiv.sensitivity.published import PublishedResult

    items: list[SummaryItem] = []
    fit_done = False
    for res in results:
        fit, focus = None, None
        if isinstance(res, IVFit):
            fit, focus = res, res.treatments[0]
        elif isinstance(res, (SweepResult, PriorResult)):
            fit, focus = res.fit, res.focus
        elif not isinstance(res, (CorrelationBounds, DiscreteBounds, PublishedResult,
                                  Calibration)):
            raise InputError(f"summary_intervals cannot draw a {type(res).__name__}; give fit, "
                             "sweep, prior, correlation-bounds, discrete-bounds or published "
                             "results, or SummaryItem rows")
        if fit is not None and not fit_done:
            fit_done = True
            items += _fit_items(fit, focus)
        if isinstance(res, SweepResult):
            items += _sweep_items(res)
        elif isinstance(res, PriorResult):
            pct = _pct(res.confidence_level)
            laws = "; ".join(f"{z} ~ {p}" for z, p in zip(res.instruments, res.priors))
            items.append(SummaryItem(f"{pct} prior interval", (res.interval,),
                                     f"direct effect {laws}", "direct effect", "interval",
                                     res.center))
        elif isinstance(res, CorrelationBounds):
            items += _correlation_items(res)
        elif isinstance(res, DiscreteBounds):
            items += _discrete_items(res)
        elif isinstance(res, PublishedResult):
            items += _published_items(res)
    return items


def _fit_items(fit, focus) -> list[SummaryItem]:
    pct = _pct(fit.confidence_level)
    out = [SummaryItem(f"2SLS, {pct} CI", (fit.conf_int(focus),), "exclusion holds exactly",
                       "exclusion", "interval", fit.tsls.value(focus))]
    if fit.ar_set is not None:
        out.append(SummaryItem(f"Anderson–Rubin {pct} set", tuple(fit.ar_set),
                               "exclusion holds exactly; robust to a weak first stage",
                               "exclusion", "interval"))
    return out


def _sweep_items(res) -> list[SummaryItem]:
    pct = _pct(res.confidence_level)
    ranges = ", ".join(f"{z} in [{format_number(b.low)}, {format_number(b.high)}]"
                       for z, b in zip(res.instruments, res.direct_set))
    words = _minus(f"direct effect {ranges}")
    out = [SummaryItem("identified set", (res.identified_set,), words, "direct effect", "set"),
           SummaryItem(f"union of {pct} intervals", (res.union_ci,), words, "direct effect",
                       "interval")]
    if res.ar_set is not None:
        out.append(SummaryItem(f"weak-IV-robust {pct} set", tuple(res.ar_set), words,
                               "direct effect", "interval"))
    return out


def _published_items(res) -> list[SummaryItem]:
    # "from printed numbers" leads the grey line rather than the label: the label shares its
    # line with the numbers and would run into them
    pct = _pct(res.confidence_level)
    b = res.direct_set
    words = _minus(f"from printed numbers: direct effect in [{format_number(b.low)}, "
                   f"{format_number(b.high)}]")
    out = [SummaryItem("identified set", (res.identified_set,), words, "direct effect", "set"),
           SummaryItem(f"union of {pct} intervals", (res.union_ci,), words, "direct effect",
                       "interval"),
           SummaryItem(f"weak-IV-robust {pct} set", tuple(res.ar_set), words,
                       "direct effect", "interval")]
    if res.prior is not None:
        out.append(SummaryItem(f"{pct} prior interval", (res.prior.interval,),
                               f"from printed numbers: direct effect ~ {res.prior.law}",
                               "direct effect", "interval", res.prior.center))
    return out


def _correlation_items(res) -> list[SummaryItem]:
    pct = _pct(res.confidence_level)
    words = f"|corr(Z, u)| ≤ {format_number(res.max_ratio)}·|corr(X, u)|, same sign"
    out = [SummaryItem("correlation bounds", tuple(res.pieces), words,
                       "partial identification", "set")]
    if res.ci is not None:
        out.append(SummaryItem(f"correlation bounds, {pct} CI", (res.ci,), words,
                               "partial identification", "interval"))
    return out


def _discrete_items(res) -> list[SummaryItem]:
    pct = _pct(res.confidence_level)
    words = (f"{res.table.instrument} acts directly on at most {format_number(res.budget)} of "
             "units" + ("; monotone" if res.monotone else ""))
    bounds = (res.bounds,) if res.bounds is not None else ()
    out = [SummaryItem("discrete bounds", bounds, words, "partial identification", "set")]
    if res.ci is not None:
        out.append(SummaryItem(f"discrete bounds, {pct} CI", (res.ci,), words,
                               "partial identification", "interval"))
    return out


def summary_intervals(items, ax=None, *, threshold: float | None = None,
                      xlabel: str | None = None, note: str | None = None):
    """Every analysis of a run as one horizontal interval each, labelled with its assumption.

    Parameters
    ----------
    items : sequence of SummaryItem or result objects
        Result objects are turned into rows by :func:`summary_items` (rows given directly are
        kept as they are, in order).
    threshold : float, optional
        Drawn as a vertical line; by default the threshold of the first result that examines
        one (sweep, correlation or discrete bounds).
    xlabel : str, optional
        By default "effect of FOCUS" from the first result that names it.

    Returns
    -------
    matplotlib.figure.Figure
    """
    rows: list[SummaryItem] = []
    for item in items:
        rows += [item] if isinstance(item, SummaryItem) else summary_items(item)
    rows = list(dict.fromkeys(rows))
    if not rows:
        raise InputError("summary_intervals needs at least one result or SummaryItem")
    if threshold is None:
        threshold = next((_threshold_of(i) for i in items if _threshold_of(i) is not None),
                         None)
    if xlabel is None:
        xlabel = next((f"effect of {name}" for name in (_focus_name(i) for i in items)
                       if name), "effect")
    with _style():
        canvas = _canvas(ax)
        ax = canvas.ax
        ends = [e for row in rows for e in _ends(row.pieces)]
        ends += [row.point for row in rows if row.point is not None]
        xlo, xhi = _limits([*ends, threshold], pad=0.06)
        if any(not math.isfinite(e) for e in ends):
            span = xhi - xlo
            xlo, xhi = xlo - 0.06 * span, xhi + 0.06 * span
        n = len(rows)
        for i, row in enumerate(rows):
            y = n - 1 - i
            colour = FAMILY_COLOURS.get(row.family, INK)
            _summary_row(ax, row, y, colour, xlo, xhi)
        if threshold is not None:
            ax.axvline(threshold, color=GREY, linestyle=(0, (4, 2)), linewidth=0.8, zorder=0,
                       label=f"threshold {format_number(threshold)}")
        ax.set_xlim(xlo, xhi)
        ax.set_ylim(-0.4, n - 1 + 0.65)
        ax.set_yticks([])
        ax.spines["left"].set_visible(False)
        ax.set_xlabel(xlabel)
        for family, colour in FAMILY_COLOURS.items():
            if any(r.family == family for r in rows):
                ax.plot([], [], color=colour, linewidth=2.0, label=_FAMILY_WORDS[family])
        caption = ["Each row holds only under its own assumption (grey text); a bound that "
                   "excludes the threshold does not prove the instrument valid."]
        return _finish(canvas, caption, note=note, axes_in=SUMMARY_ROW_IN * n,
                       left_in=SUMMARY_LEFT_IN)


_FAMILY_WORDS = {"exclusion": "exclusion assumed exact",
                 "direct effect": "direct effect bounded / prior",
                 "partial identification": "weaker restriction (bounds)"}


def _threshold_of(result) -> float | None:
    """The threshold a result examines (sweep, correlation or discrete bounds), if any."""
    breakdown = getattr(result, "breakdown", None)
    value = getattr(breakdown, "threshold", None) if breakdown is not None else None
    if value is None and not isinstance(result, SummaryItem):
        value = getattr(result, "threshold", None)
    return value if isinstance(value, (int, float)) else None


def _focus_name(result) -> str | None:
    for attr in ("focus", "treatment"):
        value = getattr(result, attr, None)
        if isinstance(value, str):
            return value
    table = getattr(result, "table", None)
    if table is not None:
        return table.treatment
    treatments = getattr(result, "treatments", None)
    return treatments[0] if treatments else None


def _row_texts(ax, y: float, xlo: float, xhi: float, label: str, numbers: str,
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


def _summary_row(ax, row: SummaryItem, y: float, colour: str, xlo: float, xhi: float) -> None:
    """One row: the label and the numbers, the assumption under them, then the bar."""
    numbers = " ∪ ".join(str(p) for p in row.pieces) if row.pieces else "empty"
    _row_texts(ax, y, xlo, xhi, row.label, _minus(numbers), row.assumption)
    width = 3.2 if row.kind == "set" else 1.2
    if not row.pieces:
        ax.text(0.5 * (xlo + xhi), y, "empty: the model does not fit the data", ha="center",
                va="center", fontsize=SMALL_PT, color=colour)
        return
    for piece in row.pieces:
        low, high = max(piece.low, xlo), min(piece.high, xhi)
        (line,) = ax.plot([low, high], [y, y], color=colour, linewidth=width,
                          solid_capstyle="butt", zorder=3, clip_on=False)
        line.set_gid(f"row:{row.label}")
        for end, edge, marker in ((piece.low, xlo, "<"), (piece.high, xhi, ">")):
            if math.isinf(end):
                ax.plot([edge], [y], marker=marker, markersize=4, color=colour,
                        linestyle="none", zorder=3, clip_on=False)
            elif row.kind == "interval":
                ax.plot([end], [y], marker="|", markersize=5, color=colour,
                        linestyle="none", zorder=3)
    if row.point is not None:
        ax.plot([row.point], [y], marker="o", markersize=3.2, color=colour,
                markeredgecolor=WHITE, markeredgewidth=0.5, linestyle="none", zorder=4)


# ----------------------------------------------------------------------------- 6. calibration
BAR_HEIGHT = 0.3          # benchmark bars, in rows (the label sits above the bar)


@dataclass(frozen=True)
class _CalibrationRow:
    label: str
    value: float                      # bar end or point estimate, in the x-axis unit
    interval: Interval | None         # zero-first-stage interval (None: a benchmark bar)
    numbers: str                      # the value(s) as printed at the right
    gid: str


def _share_text(share: float) -> str:
    if not math.isfinite(share):
        return "reduced form is zero"
    return _minus(f"{format_number(100 * share, 3)}% of RF")


def _calibration_rows(cal, single: bool) -> list[_CalibrationRow]:
    rows = []
    for b in cal.benchmarks:
        label = f"without {b.name}" + ("" if b.columns == (b.name,) else
                                       f" ({', '.join(b.columns)})")
        if not single:
            label += f" · {b.instrument}"
        numbers = (f"{_minus(format_number(b.implied_direct, 3))} "
                   f"({_share_text(b.implied_direct_rf)})")
        rows.append(_CalibrationRow(label, b.implied_direct if single else b.implied_direct_rf,
                                    None, numbers, f"benchmark:{b.name}:{b.instrument}"))
    z = cal.zero_first_stage
    if z is not None:
        for k, name in enumerate(z.instruments):
            interval = z.interval[k] if single else z.interval_rf[k]
            label = f"zero first stage ({z.group} == 1)" + ("" if single else f" · {name}")
            ci = z.interval[k]
            numbers = _minus(f"{format_number(float(z.direct[k]), 3)} "
                             f"[{format_number(ci.low, 3)}, {format_number(ci.high, 3)}]")
            value = float(z.direct[k]) if single else z.direct_rf[k]
            rows.append(_CalibrationRow(label, value, interval, numbers,
                                        f"zero-first-stage:{name}"))
    return rows


def _rf_share_axis(ax, reduced_form: float, z: str) -> bool:
    """Top axis: the bottom axis (outcome units) as a signed share of the reduced form."""
    if not (math.isfinite(reduced_form) and reduced_form != 0.0):
        return False
    from matplotlib.ticker import MaxNLocator, PercentFormatter

    top = ax.secondary_xaxis("top", functions=(lambda x: x / reduced_form,
                                               lambda s: s * reduced_form))
    top.xaxis.set_major_locator(MaxNLocator(nbins=5, steps=[1, 2, 2.5, 5, 10]))
    top.xaxis.set_major_formatter(PercentFormatter(xmax=1.0))
    top.set_xlabel(f"share of the reduced form of {z} ({_minus(format_number(reduced_form, 3))})",
                   fontsize=SMALL_PT, color=GREY)
    top.tick_params(labelsize=SMALL_PT, colors=GREY)
    return True


def calibration_benchmarks(calibration, ax=None, *, note: str | None = None):
    """Reference magnitudes for the direct effect: each covariate benchmark of a calibration
    as a horizontal bar from zero to its implied direct effect, and the zero-first-stage
    estimate as a point with its confidence interval.

    With one instrument the x-axis is in outcome units (the direct effect of a unit of the
    instrument) and the top axis gives the share of the instrument's reduced form; with several
    the x-axis is the share of each instrument's own reduced form, which makes the rows
    comparable.  Every number is read from :class:`~sensiv.sensitivity.calibrate.Calibration`
    (``benchmarks``, ``zero_first_stage``, ``scale``).

    Parameters
    ----------
    calibration : sensiv.sensitivity.calibrate.Calibration
    ax : matplotlib.axes.Axes, optional
    note : str, optional
        A last caption line (e.g. that the data are invented).

    Returns
    -------
    matplotlib.figure.Figure
    """
    cal = calibration
    z = cal.zero_first_stage
    if not cal.benchmarks and z is None:
        raise InputError("this calibration has no covariate benchmark (no controls) and no "
                         "zero-first-stage estimate, so there is nothing to draw; add --control "
                         "or --group, or --no-first-stage-group")
    single = len(cal.instruments) == 1
    rows = _calibration_rows(cal, single)
    with _style():
        canvas = _canvas(ax)
        ax = canvas.ax
        ends = [0.0, *(r.value for r in rows),
                *(e for r in rows if r.interval is not None for e in _ends([r.interval]))]
        xlo, xhi = _limits(ends, pad=0.06)
        n = len(rows)
        ax.axvline(0.0, color=MID_GREY, linewidth=0.6, zorder=1)
        for i, row in enumerate(rows):
            y = n - 1 - i
            _row_texts(ax, y, xlo, xhi, row.label, row.numbers, None)
            if row.interval is None:
                value = min(max(row.value, xlo), xhi)
                (bar,) = ax.barh([y], [value], left=0.0, height=BAR_HEIGHT, color=LIGHT_BLUE,
                                 edgecolor=BLUE, linewidth=0.6, zorder=2,
                                 label="covariate benchmark").patches
                bar.set_gid(row.gid)
                # a marker at the end keeps a bar too short to see visible
                ax.plot([value], [y], marker="D", markersize=2.6, color=BLUE,
                        linestyle="none", zorder=3, clip_on=False)
            else:
                lo, hi = max(row.interval.low, xlo), min(row.interval.high, xhi)
                pct = _pct(z.confidence_level)
                (line,) = ax.plot([lo, hi], [y, y], color=INK, linewidth=1.2, marker="|",
                                  markersize=5, zorder=3, clip_on=False,
                                  label=f"zero first stage, {pct} interval")
                line.set_gid(row.gid)
                ax.plot([row.value], [y], marker="o", markersize=3.2, color=INK,
                        markeredgecolor=WHITE, markeredgewidth=0.5, linestyle="none",
                        zorder=4)
        ax.set_xlim(xlo, xhi)
        ax.set_ylim(-0.4, n - 1 + 0.65)
        ax.set_yticks([])
        ax.spines["left"].set_visible(False)
        instruments = ", ".join(cal.instruments)
        if single:
            ax.set_xlabel(f"implied direct effect of {instruments} on {cal.outcome}")
            top = _rf_share_axis(ax, float(cal.scale.reduced_form[0]), cal.instruments[0])
        else:
            from matplotlib.ticker import PercentFormatter

            ax.xaxis.set_major_formatter(PercentFormatter(xmax=1.0))
            ax.set_xlabel("implied direct effect as a share of its instrument's reduced form")
            top = False
        from sensiv.estimation.iv import WEAK_F

        caption = ["Reference magnitudes, not the true direct effect."]
        which = (f"of {instruments}" if single else
                 f"of each instrument ({instruments}; the x-axis in shares of its own reduced "
                 "form, the numbers at the right in outcome units)")
        if cal.benchmarks:
            caption.append(
                f"Bars: the shift in the reduced-form coefficient {which} on {cal.outcome} when "
                "the named control is left out (without minus with). Assumption: an "
                "unobserved violation of the exclusion restriction is comparable in size to "
                "the confounding that an observed control removes (a judgement, not a test).")
        if z is not None:
            f_words = ", ".join(f"{format_number(f, 3)}" for f in z.first_stage_f.values())
            caption.append(
                f"Point and line: the reduced form in the subgroup {z.group} == 1 with its "
                f"{_pct(z.confidence_level)} interval ({z.se_type} covariance, "
                f"n{NBSP}={NBSP}{z.n}). Assumption: there the "
                f"{'instrument does' if single else 'instruments do'} not move "
                f"{', '.join(cal.treatments)}, and the direct effect is as in the whole sample."
                + (f" The first-stage F there is {f_words} (≥ {format_number(WEAK_F)}): the "
                   "premise looks false." if z.premise_doubtful else ""))
        caption.append(f"Whole sample: n{NBSP}={NBSP}{cal.n}.")
        order = ["covariate benchmark"]
        if z is not None:
            order.append(f"zero first stage, {_pct(z.confidence_level)} interval")
        return _finish(canvas, caption, note=note, axes_in=SUMMARY_ROW_IN * n,
                       left_in=SUMMARY_LEFT_IN, top_axis=top, legend_order=order)
