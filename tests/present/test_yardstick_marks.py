"""Yardsticks drawn on the sweep curve, and the calibration figure's axes.

Common practice, no source: a mark sits at the yardstick's implied |direct effect| on the
x-axis (outcome units with one instrument); a secondary axis runs the same way as its main
axis; tick labels carry no dangling offset factor.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import matplotlib
import pytest

from sensiv.data import Spec
from sensiv.present import figures
from sensiv.present.figures.yardstick_marks import marks_for
from sensiv.sensitivity import bounds, calibrate
from sensiv.sensitivity.against_yardsticks import compare

matplotlib.use("Agg")
EXAMPLE = Path(__file__).resolve().parents[2] / "examples" / "irrigation.csv"
SPEC = Spec("maize_yield", ["irrigation_hours"], ["height_m"], controls=["plot_ha", "soil"],
            cluster="village")


@pytest.fixture(scope="module")
def pair():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return (bounds.sweep(EXAMPLE, SPEC, direct=["-0.005:0.005"], points=11),
                calibrate.calibrate(EXAMPLE, SPEC))


def test_marks_sit_at_the_implied_direct_effect(pair):
    sweep, cal = pair
    cmp = compare(sweep, cal)
    marks = marks_for(cmp, 0.005, [0.005])
    assert [m.x for m in marks] == [i.implied for i in cmp.items]
    # an axis running to negative direct effects puts them on its side
    assert all(m.x < 0 for m in marks_for(cmp, -0.005, [0.005]))


def test_curve_draws_the_marks_and_names_them(pair):
    import matplotlib.pyplot as plt

    sweep, cal = pair
    fig = figures.sensitivity_curve(sweep, yardsticks=compare(sweep, cal))
    ax = fig.axes[0]
    drawn = [line for line in ax.get_lines() if line.get_gid() == "yardstick"]
    assert len(drawn) == len(cal.yardsticks)
    texts = " ".join(t.get_text() for t in fig.texts) + " ".join(t.get_text()
                                                                   for t in ax.texts)
    assert "without soil" in texts and "yardsticks" in texts
    plain = figures.sensitivity_curve(sweep)
    assert not [l for l in plain.axes[0].get_lines() if l.get_gid() == "yardstick"]
    plt.close(fig)
    plt.close(plain)


def test_calibration_top_axis_runs_with_the_bottom_axis(pair):
    import matplotlib.pyplot as plt

    _, cal = pair
    assert cal.scale.reduced_form[0] < 0  # the case that used to run backwards
    fig = figures.calibration_yardsticks(cal)
    fig.canvas.draw()
    ax = fig.axes[0]
    top = ax.child_axes[0] if ax.child_axes else None
    assert top is not None
    lo, hi = ax.get_xlim()
    tlo, thi = top.get_xlim()
    assert (hi - lo) * (thi - tlo) > 0
    assert ax.xaxis.get_offset_text().get_text() == ""
    plt.close(fig)
