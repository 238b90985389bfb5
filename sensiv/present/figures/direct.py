"""What the direct-effect figures (:mod:`~sensiv.present.figures.curve` and
:mod:`~sensiv.present.figures.frontier`) read, and how their axes are built.

Both figures draw a sweep from data or a stress test of published numbers alike
(:class:`~sensiv.sensitivity.published.PublishedResult`: one instrument, its set a single
interval, and the caption says the numbers are printed ones); :func:`direct_view` reads either
into one :class:`DirectView`.  The x-axis is the allowed direct effect ``x = t·e``: ``t`` is
the scale of the stated set Γ and ``e`` its end of largest magnitude (one instrument, outcome
units), or ``x = t`` itself with several instruments (:func:`direct_axis`).  The top axis
converts ``x`` to a share of the reduced-form coefficient using ``direct_set_rf`` of the
result (:func:`share_axis`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from sensiv.core import labels
from sensiv.core.errors import InputError
from sensiv.core.results import Interval, format_number
from sensiv.present.figures.style import GREY, NBSP, SMALL_PT, minus, pct
from sensiv.sensitivity import published_covariance

X_TICK_BINS = 5           # published figures: at most this many x intervals between ticks

# What each kind of result must carry to be drawn (read by duck typing, not by class).
SWEEP_FIELDS = ("instruments", "direct_set", "direct_set_rf", "confidence_level", "focus",
                "outcome", "se_type", "n", "polytope", "breakdown", "curve",
                "curve_extended", "frontier")
PUBLISHED_FIELDS = ("reported", "covariance", "range_text", "direct_set", "direct_set_rf",
                    "confidence_level", "focus", "breakdown", "curve", "curve_extended",
                    "frontier")


# ----------------------------------------------------------------------------- the x-axis
@dataclass(frozen=True)
class DirectAxis:
    """How the scale ``t`` of the stated set becomes the x-axis of the direct-effect figures."""

    extent: float         # x = t · extent
    label: str            # x-axis label
    share: float | None   # top axis: share of the reduced form at t = 1 (None: not shown)
    share_label: str
    range_text: str       # the stated set in words


def direct_axis(sweep) -> DirectAxis:
    """The x-axis of a :class:`DirectView` (or a sweep): unit, label and top-axis share."""
    rf = sweep.direct_set_rf
    if len(sweep.instruments) == 1:
        column = sweep.instruments[0]
        # the label without its unit when the axis states the direct effect's unit
        z = (labels.stem(column) if labels.direct_unit(sweep.outcome, column) else
             labels.name(column))
        box = sweep.direct_set[0]
        low, high = box.low, box.high
        extent = high if abs(high) >= abs(low) else low
        rf_end = max(abs(rf[0].low), abs(rf[0].high)) if rf is not None else math.inf
        range_text = f"[{format_number(low)}, {format_number(high)}]"
        if extent == 0.0:
            return DirectAxis(1.0, f"scale of the direct-effect set of {z} (set is {{0}})",
                              None, "", range_text)
        other = (low if extent == high else high) / extent
        if other == -1.0:
            label = f"bound x on |direct effect| of {z}"
            words = "|direct effect| ≤ x"
        else:
            k = "0" if other == 0.0 else minus(format_number(other, 3)) + "x"
            words = (f"direct effect in [{k}, x]" if extent > 0 else
                     f"direct effect in [x, {k}]")
            label = f"x: {words} of {z}"
        share = rf_end if math.isfinite(rf_end) else None
        label += _unit_suffix(sweep.outcome, column)
        return DirectAxis(extent, label, share, f"x as a share of |reduced form| of {z}",
                          range_text)
    rf_ends = [max(abs(i.low), abs(i.high)) for i in rf]
    share = max(rf_ends) if all(math.isfinite(e) for e in rf_ends) else None
    range_text = ", ".join(f"{labels.name(z)} in [{format_number(b.low)}, "
                           f"{format_number(b.high)}]"
                           for z, b in zip(sweep.instruments, sweep.direct_set))
    return DirectAxis(1.0, "scale t of the stated direct-effect set (t = 1: the set)", share,
                      "largest direct effect as a share of its reduced form", range_text)


def _unit_suffix(outcome: str, instrument: str) -> str:
    """`` (t/ha)`` when the outcome's label states a unit (a direct effect is in it; `` (t/ha
    per metre)`` when the instrument's states one too)."""
    unit = labels.direct_unit(outcome, instrument)
    return f" ({unit})" if unit else ""


def _in_units(outcome: str) -> str:
    """``"(outcome units) "`` unless the outcome's label already names its unit."""
    return "" if labels.unit(outcome) else "(outcome units) "


def thin_x_ticks(ax) -> None:
    """At most :data:`X_TICK_BINS` intervals between bottom ticks: at single-column width the
    default locator can place labels such as "−0.25" so close that they touch."""
    from matplotlib.ticker import MaxNLocator

    ax.xaxis.set_major_locator(MaxNLocator(nbins=X_TICK_BINS, steps=[1, 2, 2.5, 5, 10]))


def share_axis(ax, axis: DirectAxis, x_end: float) -> bool:
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


# ----------------------------------------------------------------------------- the view
@dataclass(frozen=True)
class DirectView:
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
    outcome: str = published_covariance.OUTCOME   # column (or role) whose label names it


def direct_view(result) -> DirectView:
    """The :class:`DirectView` of a sweep result or a published stress test.

    Raises
    ------
    InputError
        When ``result`` is neither (it lacks a field the figures read).
    """
    if all(hasattr(result, name) for name in PUBLISHED_FIELDS):
        rf = (result.direct_set_rf,) if result.direct_set_rf is not None else None
        return DirectView((published_covariance.INSTRUMENT,), (result.direct_set,), rf,
                          result.confidence_level, result.focus, result.breakdown,
                          result.curve, result.curve_extended, result.frontier,
                          published_caption(result),
                          "this published result has no breakdown frontier; recompute it "
                          "with sensiv.sensitivity.published.published_analysis")
    if all(hasattr(result, name) for name in SWEEP_FIELDS):
        return DirectView(result.instruments, result.direct_set, result.direct_set_rf,
                          result.confidence_level, result.focus, result.breakdown,
                          result.curve, result.curve_extended, result.frontier,
                          sweep_caption(result),
                          "this sweep result has no breakdown frontier (it was built without "
                          "sensiv.sensitivity.bounds.analyse); recompute it with "
                          "sensiv.sensitivity.bounds.sweep", outcome=result.outcome)
    raise InputError(f"the direct-effect figures draw a sweep or a published stress test, not a "
                     f"{type(result).__name__}; give a sensiv.sensitivity.bounds.SweepResult or a "
                     "sensiv.sensitivity.published.PublishedResult")


# ----------------------------------------------------------------------------- captions
def sweep_caption(sweep) -> str:
    """The assumption of a sweep from data, for the figure caption."""
    level = pct(sweep.confidence_level)
    fixed = (f"Apart from it the instrument is valid; β is the "
             f"{labels.effect_words(sweep.focus, sweep.outcome)}; union of {level} intervals "
             f"with {sweep.se_type} covariance, "
             f"n = {sweep.n}.")
    if len(sweep.instruments) == 1 and not sweep.polytope:
        b = sweep.direct_set[0]
        return (f"Assumption: the direct effect of {labels.name(sweep.instruments[0])} on "
                f"{labels.name(sweep.outcome)} "
                f"{_in_units(sweep.outcome)}lies in the range on the x-axis; stated range "
                f"[{minus(format_number(b.low))}, {minus(format_number(b.high))}]. {fixed}")
    shape = "polytope with bounding box" if sweep.polytope else "set"
    ranges = ", ".join(f"{labels.name(z)} in [{minus(format_number(b.low))}, "
                       f"{minus(format_number(b.high))}]"
                       for z, b in zip(sweep.instruments, sweep.direct_set))
    return (f"Assumption: the direct effects on {labels.name(sweep.outcome)} "
            f"{_in_units(sweep.outcome)}"
            f"lie in t times "
            f"the stated {shape} ({ranges}). {fixed}")


def covariance_words(method: str) -> str:
    """How a published stress test got the covariance of reduced form and first stage."""
    pc = published_covariance
    return {pc.METHOD_BACKED_OUT: "covariance of reduced form and first stage backed out of "
                                  "the printed se (delta method)",
            pc.METHOD_CLIPPED: "covariance of reduced form and first stage backed out of the "
                               "printed se, its correlation clipped to [−1, 1]",
            pc.METHOD_WORST: "covariance of reduced form and first stage not printed: worst "
                             "case over the admissible correlations"}[method]


def _printed(role: str) -> str:
    """A role of a stress test of printed numbers: its label, else "the instrument"."""
    return labels.active().get(role) or f"the {role}"


def published_caption(res) -> str:
    """The assumption of a stress test of published numbers, for the figure caption."""
    b = res.direct_set
    n = res.reported.n
    return (f"Assumption: the direct effect of {_printed('instrument')} on "
            f"{_printed('outcome')} {_in_units(published_covariance.OUTCOME)}"
            f"lies in the range on the x-axis; stated range [{minus(format_number(b.low))}, "
            f"{minus(format_number(b.high))}] ({minus(res.range_text)}). Apart from it the "
            f"instrument is valid. From printed numbers only: union of "
            f"{pct(res.confidence_level)} intervals around the printed estimate "
            f"{minus(format_number(res.reported.estimate))} (se "
            f"{format_number(res.reported.se)}); "
            f"{covariance_words(res.covariance.method)}; "
            + (f"n{NBSP}={NBSP}{n}." if n is not None else "n not printed."))
