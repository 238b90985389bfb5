"""The calibration figure: reference magnitudes for the direct effect — each covariate
yardstick of a calibration as a bar from zero to its implied direct effect, and the
zero-first-stage estimate as a point with its confidence interval."""

from __future__ import annotations

import math
from dataclasses import dataclass

from sensiv.core import labels
from sensiv.core.errors import InputError
from sensiv.core.results import Interval, format_number
from sensiv.estimation.iv import WEAK_F
from sensiv.present.figures.marks import row_texts
from sensiv.present.figures.style import (BLUE, GREY, INK, LIGHT_BLUE, MID_GREY, NBSP, SMALL_PT,
                                          SUMMARY_LEFT_IN, SUMMARY_ROW_IN, WHITE, ends, finish,
                                          limits, make_canvas, minus, pct, style_context)

BAR_HEIGHT = 0.3          # yardstick bars, in rows (the label sits above the bar)
YARDSTICK_LABEL = "leave-one-out yardstick"


def calibration_yardsticks(calibration, ax=None, *, note: str | None = None):
    """Reference magnitudes for the direct effect: each leave-one-out yardstick of a calibration
    as a horizontal bar from zero to its implied direct effect, and the zero-first-stage
    estimate as a point with its confidence interval.

    With one instrument the x-axis is in outcome units (the direct effect of a unit of the
    instrument) and the top axis gives the share of the instrument's reduced form; with several
    the x-axis is the share of each instrument's own reduced form, which makes the rows
    comparable.  Every number is read from :class:`~sensiv.sensitivity.calibrate.Calibration`
    (``yardsticks``, ``zero_first_stage``, ``scale``).

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
    if not cal.yardsticks and z is None:
        raise InputError("this calibration has no leave-one-out yardstick (no controls) and no "
                         "zero-first-stage estimate, so there is nothing to draw; add --control "
                         "or --group, or --no-first-stage-group")
    single = len(cal.instruments) == 1
    rows = _calibration_rows(cal, single)
    with style_context():
        canvas = make_canvas(ax)
        ax = canvas.ax
        values = [0.0, *(r.value for r in rows),
                  *(e for r in rows if r.interval is not None for e in ends([r.interval]))]
        xlo, xhi = limits(values, pad=0.06)
        n = len(rows)
        ax.axvline(0.0, color=MID_GREY, linewidth=0.6, zorder=1)
        _draw_rows(ax, rows, xlo, xhi, _interval_label(z))
        ax.set_xlim(xlo, xhi)
        ax.set_ylim(-0.4, n - 1 + 0.65)
        ax.set_yticks([])
        ax.spines["left"].set_visible(False)
        top = _x_axes(ax, cal, single)
        order = [YARDSTICK_LABEL, *([_interval_label(z)] if z is not None else [])]
        return finish(canvas, _caption(cal, single), note=note, axes_in=SUMMARY_ROW_IN * n,
                      left_in=SUMMARY_LEFT_IN, top_axis=top, legend_order=order)


# ----------------------------------------------------------------------------- rows
@dataclass(frozen=True)
class _CalibrationRow:
    label: str
    value: float                      # bar end or point estimate, in the x-axis unit
    interval: Interval | None         # zero-first-stage interval (None: a yardstick bar)
    numbers: str                      # the value(s) as printed at the right
    gid: str


def _share_text(share: float, absolute: bool = False) -> str:
    if not math.isfinite(share):
        return "reduced form is zero"
    return minus(f"{format_number(100 * share, 3)}% of {'|RF|' if absolute else 'RF'}")


def _interval_label(z) -> str | None:
    """Legend label of the zero-first-stage interval (None: there is none)."""
    return None if z is None else f"zero first stage, {pct(z.confidence_level)} interval"


def _calibration_rows(cal, single: bool) -> list[_CalibrationRow]:
    rows = []
    for b in cal.yardsticks:
        label = f"without {labels.name(b.name)}" + ("" if b.columns == (b.name,) else
                                          f" ({', '.join(map(labels.name, b.columns))})")
        if not single:
            label += f" · {labels.name(b.instrument)}"
        rf = abs(float(cal.scale.reduced_form[cal.instruments.index(b.instrument)]))
        share = b.implied_direct_rf if not single else (b.implied_direct / rf if rf > 0
                                                        else math.nan)
        numbers = f"{minus(format_number(b.implied_direct, 3))} ({_share_text(share, single)})"
        rows.append(_CalibrationRow(label, b.implied_direct if single else b.implied_direct_rf,
                                    None, numbers, f"yardstick:{b.name}:{b.instrument}"))
    z = cal.zero_first_stage
    if z is not None:
        for k, name in enumerate(z.instruments):
            interval = z.interval[k] if single else z.interval_rf[k]
            label = (f"zero first stage ({z.group} == 1)"
                     + ("" if single else f" · {labels.name(name)}"))
            ci = z.interval[k]
            numbers = minus(f"{format_number(float(z.direct[k]), 3)} "
                            f"[{format_number(ci.low, 3)}, {format_number(ci.high, 3)}]")
            value = float(z.direct[k]) if single else z.direct_rf[k]
            rows.append(_CalibrationRow(label, value, interval, numbers,
                                        f"zero-first-stage:{name}"))
    return rows


def _draw_rows(ax, rows: list[_CalibrationRow], xlo: float, xhi: float,
               interval_label: str | None) -> None:
    """Each row top to bottom: its texts, then a yardstick bar or the interval with its point."""
    n = len(rows)
    for i, row in enumerate(rows):
        y = n - 1 - i
        row_texts(ax, y, xlo, xhi, row.label, row.numbers, None)
        if row.interval is None:
            value = min(max(row.value, xlo), xhi)
            (bar,) = ax.barh([y], [value], left=0.0, height=BAR_HEIGHT, color=LIGHT_BLUE,
                             edgecolor=BLUE, linewidth=0.6, zorder=2,
                             label=YARDSTICK_LABEL).patches
            bar.set_gid(row.gid)
            # a marker at the end keeps a bar too short to see visible
            ax.plot([value], [y], marker="D", markersize=2.6, color=BLUE,
                    linestyle="none", zorder=3, clip_on=False)
        else:
            lo, hi = max(row.interval.low, xlo), min(row.interval.high, xhi)
            (line,) = ax.plot([lo, hi], [y, y], color=INK, linewidth=1.2, marker="|",
                              markersize=5, zorder=3, clip_on=False, label=interval_label)
            line.set_gid(row.gid)
            ax.plot([row.value], [y], marker="o", markersize=3.2, color=INK,
                    markeredgecolor=WHITE, markeredgewidth=0.5, linestyle="none", zorder=4)


# ----------------------------------------------------------------------------- axes and caption
def _x_axes(ax, cal, single: bool) -> bool:
    """The x-label and, with one instrument, the top axis in shares of the reduced form;
    True when a top axis is drawn."""
    if single:
        from matplotlib.ticker import FuncFormatter

        # plain numbers on the ticks: no offset or ×10^k factor dangling beside the label
        ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: minus(format_number(v, 3))))
        ax.set_xlabel(f"implied direct effect of {', '.join(map(labels.name, cal.instruments))} on "
                      f"{labels.name(cal.outcome)}")
        return _rf_share_axis(ax, float(cal.scale.reduced_form[0]), cal.instruments[0])
    from matplotlib.ticker import PercentFormatter

    ax.xaxis.set_major_formatter(PercentFormatter(xmax=1.0))
    ax.set_xlabel("implied direct effect as a share of its instrument's reduced form")
    return False


def _rf_share_axis(ax, reduced_form: float, z: str) -> bool:
    """Top axis: the bottom axis (outcome units) as a signed share of the reduced form."""
    if not (math.isfinite(reduced_form) and reduced_form != 0.0):
        return False
    from matplotlib.ticker import MaxNLocator, PercentFormatter

    # shares of |reduced form|, signed as the direct effect: the top axis runs the same way
    # as the bottom one whatever the sign of the reduced form
    size = abs(reduced_form)
    top = ax.secondary_xaxis("top", functions=(lambda x: x / size, lambda s: s * size))
    top.xaxis.set_major_locator(MaxNLocator(nbins=5, steps=[1, 2, 2.5, 5, 10]))
    top.xaxis.set_major_formatter(PercentFormatter(xmax=1.0))
    top.set_xlabel(f"share of |reduced form| of {labels.name(z)} (reduced form "
                   f"{minus(format_number(reduced_form, 3))})",
                   fontsize=SMALL_PT, color=GREY)
    top.tick_params(labelsize=SMALL_PT, colors=GREY)
    return True


def _caption(cal, single: bool) -> list[str]:
    """What the bars and the point assume, and the sample size."""
    z = cal.zero_first_stage
    instruments = ", ".join(map(labels.name, cal.instruments))
    caption = ["Reference magnitudes, not the true direct effect."]
    which = (f"of {instruments}" if single else
             f"of each instrument ({instruments}; the x-axis in shares of its own reduced "
             "form, the numbers at the right in outcome units)")
    if cal.yardsticks:
        caption.append(
            f"Bars: the shift in the reduced-form coefficient {which} on "
            f"{labels.name(cal.outcome)} when "
            "the named control is left out (without minus with). Assumption: an "
            "unobserved violation of the exclusion restriction is comparable in size to "
            "the confounding that an observed control removes (a judgement, not a test).")
    if z is not None:
        f_words = ", ".join(f"{format_number(f, 3)}" for f in z.first_stage_f.values())
        caption.append(
            f"Point and line: the reduced form in the subgroup {z.group} == 1 with its "
            f"{pct(z.confidence_level)} interval ({z.se_type} covariance, "
            f"n{NBSP}={NBSP}{z.n}). Assumption: there the "
            f"{'instrument does' if single else 'instruments do'} not move "
            f"{', '.join(map(labels.name, cal.treatments))}, and the direct effect is as in "
            "the whole sample."
            + (f" The first-stage F there is {f_words} (≥ {format_number(WEAK_F)}): the "
               "premise looks false." if z.premise_doubtful else ""))
    caption.append(f"Whole sample: n{NBSP}={NBSP}{cal.n}.")
    return caption
