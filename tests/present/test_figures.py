"""Figures: each renders from its result, leaves it unchanged, draws the breakdown where the
result puts it, and saves to deterministic PNG / PDF / SVG bytes.  Also the data the figures
read (breakdown frontier, extended curve, prior map) against the exact single-point routines.

Sources: common practice, no source (invariants and file-format checks); the frontier and the
prior map are checked against sensiv's own breakdown roots and closed-form prior interval.
"""

from __future__ import annotations

import json
import math
import re
import subprocess
import sys
import warnings
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from sensiv.sensitivity import bounds, prior
from sensiv.sensitivity.frontier import FRONTIER_POINTS, breakdown_frontier
from sensiv.sensitivity.linear_core import Core
from sensiv.sensitivity.union import union_interval
from sensiv.analyses.outputs import summary_rows, summary_threshold, summary_xlabel
from sensiv.present import figures
from sensiv.present.figures import style
from sensiv.data import Spec
from sensiv.core.errors import InputError
from sensiv.partial_id.correlation import correlation_bounds
from sensiv.partial_id.discrete import discrete_bounds
from sensiv.partial_id.discrete_data import from_counts
from sensiv.core.results import Interval

REL = 1e-9


def design(n=400, seed=3, k_z=1, strength=0.8):
    rng = np.random.default_rng(seed)
    z = rng.normal(size=(n, k_z))
    w = rng.normal(size=n)
    v = rng.normal(size=n)
    x = z @ np.full(k_z, strength) + 0.5 * w + v
    y = 1.0 + 0.5 * x + 0.3 * w + 0.6 * v + rng.normal(size=n)
    frame = pd.DataFrame({"y_out": y, "x_treat": x, "w": w})
    names = [f"z_{k + 1}" for k in range(k_z)]
    for k, name in enumerate(names):
        frame[name] = z[:, k]
    return frame, Spec("y_out", ["x_treat"], names, controls=["w"])


@pytest.fixture(scope="module")
def results():
    one, spec1 = design()
    two, spec2 = design(k_z=2, seed=5)
    weak, spec_w = design(strength=0.02, seed=7)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        out = {
            # breakdown inside the stated range, beyond it, at zero, and never
            "within": bounds.sweep(one, spec1, direct=["-0.3:0.3"]),
            "beyond": bounds.sweep(one, spec1, direct=["-0.05:0.05"]),
            "zero": bounds.sweep(one, spec1, direct=["-0.1:0.1"], threshold=0.5),
            "negative": bounds.sweep(one, spec1, direct=["-0.2:0.05"], threshold=0.2),
            "two": bounds.sweep(two, spec2, direct=["-0.1:0.1", "-0.05:0.05"]),
            "weak": bounds.sweep(weak, spec_w, direct=["-0.1:0.1"]),
            "prior": prior.prior_analysis(one, spec1, priors=["normal:0:0.05"]),
            "prior_two": prior.prior_analysis(two, spec2,
                                              priors=["normal:0:0.05", "uniform:-0.1:0.1"],
                                              draws=2000),
            "corr": correlation_bounds(one, spec1, max_ratio=1.0, reps=0, points=21,
                                       progress=False),
            "discrete": discrete_bounds(from_counts([[[300, 60], [20, 20]],
                                                     [[60, 40], [40, 380]]]),
                                        budget=0.1, reps=20, seed=2, points=11,
                                        progress=False),
            "no_fit": discrete_bounds(from_counts([[[180, 0], [10, 10]],
                                                   [[0, 180], [10, 10]]]),
                                      budget=0.5, reps=0, points=11, progress=False),
        }
    return out


SWEEPS = ["within", "beyond", "zero", "negative", "two", "weak"]
FIGURES = [(figures.sensitivity_curve, s) for s in SWEEPS] + \
          [(figures.breakdown_frontier, s) for s in SWEEPS] + \
          [(figures.prior_map, "prior"), (figures.prior_map, "prior_two"),
           (figures.correlation_curve, "corr"), (figures.discrete_curve, "discrete"),
           (figures.discrete_curve, "no_fit")]


def snapshot(result) -> str:
    return json.dumps(result.to_dict(), sort_keys=True, default=str)


def gid_lines(fig, gid):
    return [a for a in fig.findobj() if getattr(a, "get_gid", lambda: None)() == gid]


def extent(sweep) -> float:
    """Common practice, no source: the x-axis unit of the direct-effect figures."""
    if len(sweep.instruments) > 1:
        return 1.0
    box = sweep.direct_set[0]
    return box.high if abs(box.high) >= abs(box.low) else box.low


# ----------------------------------------------------------------------------- rendering
@pytest.mark.parametrize("draw, name", FIGURES, ids=[f"{f.__name__}-{n}" for f, n in FIGURES])
def test_figure_renders_without_touching_its_input(results, draw, name):
    from matplotlib.figure import Figure
    from matplotlib.text import Text

    res = results[name]
    before = snapshot(res)
    fig = draw(res, note="Invented test data.")
    assert isinstance(fig, Figure)
    assert snapshot(res) == before
    assert fig.get_size_inches()[0] == pytest.approx(style.WIDTH_IN)
    fig.canvas.draw()
    for text in fig.findobj(Text):
        if text.get_visible() and text.get_text().strip():
            assert text.get_fontsize() >= 7.0, text.get_text()
    # nothing drawn (labels, ticks, legend, caption) is cut off by the edge of the figure
    tight = fig.get_tightbbox(fig.canvas.get_renderer())
    width, height = fig.get_size_inches()
    slack = 0.01
    assert tight.x0 >= -slack and tight.y0 >= -slack, tight
    assert tight.x1 <= width + slack and tight.y1 <= height + slack, tight
    caption = " ".join(t.get_text() for t in fig.texts)
    assert "Assumption" in caption and "Invented test data." in caption


def test_figure_draws_into_given_axes(results):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(7, 3))
    FigureCanvasAgg(fig)
    left, right = fig.subplots(1, 2)
    assert figures.sensitivity_curve(results["within"], ax=left) is fig
    assert figures.correlation_curve(results["corr"], ax=right) is fig
    assert left.get_legend() is not None and len(fig.axes) >= 2


def test_importing_figures_does_not_import_matplotlib():
    code = ("import sys, sensiv.present.figures, sensiv.present.tables, "
            "sensiv.analyses.outputs; print('matplotlib' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True)
    assert out.stdout.strip() == "False"


# ----------------------------------------------------------------------------- breakdown marks
@pytest.mark.parametrize("name", ["within", "beyond", "negative", "two", "zero"])
def test_curve_marks_breakdown_at_result_value(results, name):
    sweep = results[name]
    fig = figures.sensitivity_curve(sweep)
    (marker,) = gid_lines(fig, "breakdown")
    x, y = marker.get_xdata()[0], marker.get_ydata()[0]
    assert x == pytest.approx(sweep.breakdown.scale * extent(sweep), rel=REL, abs=0)
    assert y == sweep.breakdown.threshold
    lo, hi = sorted(fig.axes[0].get_xlim())
    assert lo - 1e-12 <= x <= hi + 1e-12


def test_curve_runs_on_to_a_breakdown_beyond_the_stated_set(results):
    sweep = results["beyond"]
    assert sweep.breakdown.scale > 1.0 and sweep.curve_extended is not None
    fig = figures.sensitivity_curve(sweep)
    assert max(fig.axes[0].get_xlim()) == pytest.approx(
        sweep.curve_extended.scale[-1] * extent(sweep))
    assert any(t.get_text() == "stated range" for t in fig.legends[0].get_texts())


def test_unbounded_union_is_drawn_clipped_with_a_note(results):
    sweep = results["weak"]
    assert not sweep.union_ci.bounded
    fig = figures.sensitivity_curve(sweep)
    ax = fig.axes[0]
    low, high = ax.get_ylim()
    assert all(math.isfinite(v) for v in (low, high))
    ident = sweep.curve.id_upper.max() - sweep.curve.id_lower.min()
    assert high - low < 10 * max(ident, 1.0)   # no huge stand-in number
    (band,) = gid_lines(fig, "union")
    assert band.get_hatch()
    assert any("unbounded" in t.get_text() for t in ax.texts)


@pytest.mark.parametrize("name", ["within", "beyond"])
def test_curve_draws_the_bias_aware_band_with_a_legend_entry(results, name):
    # common practice, no source: the dashed edges are the result's bias-aware curve (the
    # extended one when the figure runs on past the stated set)
    sweep = results[name]
    curve = sweep.curve_extended if sweep.curve_extended is not None else sweep.curve
    fig = figures.sensitivity_curve(sweep)
    low, high = gid_lines(fig, "bias_aware")
    x = np.asarray(curve.scale) * extent(sweep)
    assert low.get_xdata() == pytest.approx(x) and high.get_xdata() == pytest.approx(x)
    assert low.get_ydata() == pytest.approx(curve.ba_lower, rel=REL)
    assert high.get_ydata() == pytest.approx(curve.ba_upper, rel=REL)
    assert any(t.get_text().startswith("bias-aware") for t in fig.legends[0].get_texts())


def test_unbounded_union_draws_no_bias_aware_band(results):
    sweep = results["weak"]
    assert not sweep.bias_aware.ci.bounded
    assert gid_lines(figures.sensitivity_curve(sweep), "bias_aware") == []


def test_frontier_marks_breakdown_and_names_regions(results):
    sweep = results["within"]
    fig = figures.breakdown_frontier(sweep)
    (marker,) = gid_lines(fig, "breakdown")
    assert marker.get_xdata()[0] == pytest.approx(sweep.breakdown.scale * extent(sweep))
    assert marker.get_ydata()[0] == sweep.breakdown.threshold
    words = " ".join(t.get_text() for t in fig.axes[0].texts)
    assert "β > θ holds" in words and "β < θ holds" in words and "fails" in words
    (line,) = gid_lines(fig, "frontier")
    np.testing.assert_allclose(line.get_ydata(), sweep.frontier.threshold)


@pytest.mark.parametrize("name, attr", [("discrete", "breakdown_budget"),
                                        ("corr", "breakdown_ratio")])
def test_bound_curves_mark_breakdown(results, name, attr):
    res = results[name]
    draw = figures.discrete_curve if name == "discrete" else figures.correlation_curve
    fig = draw(res)
    (marker,) = gid_lines(fig, "breakdown")
    assert getattr(res, attr) is not None
    assert marker.get_xdata()[0] == getattr(res, attr)
    assert marker.get_ydata()[0] == res.threshold


def test_discrete_no_fit_budgets_are_hatched(results):
    res = results["no_fit"]
    assert res.bounds is None and res.min_budget > 0
    fig = figures.discrete_curve(res)
    (region,) = gid_lines(fig, "empty")
    assert region.get_hatch()
    assert any("does not fit" in t.get_text() for t in fig.texts)


def test_prior_map_marks_the_given_prior_and_draws_the_boundary(results):
    res = results["prior"]
    fig = figures.prior_map(res)
    (given,) = gid_lines(fig, "given")
    assert (given.get_xdata()[0], given.get_ydata()[0]) == res.prior_map.given
    assert gid_lines(fig, "boundary")


# ----------------------------------------------------------------------------- summary
def test_summary_intervals_draws_every_analysis(results):
    items = [results["within"], results["prior"], results["corr"]]
    before = [snapshot(r) for r in items]
    rows = summary_rows(items)
    labels = [r.label for r in rows]
    assert labels[:2] == ["2SLS, 95% CI", "Anderson–Rubin 95% set"]
    assert {"identified set", "union of 95% intervals", "bias-aware 95% interval",
            "95% prior interval", "correlation bounds"} <= set(labels)
    fig = figures.summary_intervals(rows, threshold=summary_threshold(items),
                                    xlabel=summary_xlabel(items))
    assert [snapshot(r) for r in items] == before
    xlo, xhi = fig.axes[0].get_xlim()
    for row in rows:
        lines = gid_lines(fig, f"row:{row.label}")
        assert len(lines) == len(row.pieces)
        for line, piece in zip(lines, row.pieces):
            assert list(line.get_xdata()) == pytest.approx(
                [max(piece.low, xlo), min(piece.high, xhi)])


def test_summary_items_rows_and_unbounded_pieces():
    rows = [figures.SummaryItem("a", (Interval(-math.inf, 1.0), Interval(2.0, math.inf)),
                                "anything"),
            figures.SummaryItem("b", (), "no fit", "partial identification", "set")]
    fig = figures.summary_intervals(rows, threshold=0.0, xlabel="effect")
    assert len(gid_lines(fig, "row:a")) == 2
    with pytest.raises(InputError, match="cannot draw"):
        figures.summary_intervals([object()])
    with pytest.raises(InputError, match="cannot draw"):
        summary_rows([object()])


# ----------------------------------------------------------------------------- files
def test_saved_files_parse_and_are_byte_identical(results):
    sweep = results["within"]
    first = figures.save_figure(figures.sensitivity_curve(sweep), figures.FORMATS)
    second = figures.save_figure(figures.sensitivity_curve(sweep), figures.FORMATS)
    assert first == second
    png, pdf, svg = first["png"], first["pdf"], first["svg"]
    assert png.startswith(b"\x89PNG\r\n\x1a\n")
    assert b"tIME" not in png and b"Software" not in png
    width = int.from_bytes(png[16:20], "big")
    assert width == round(style.WIDTH_IN * style.DPI)
    assert pdf.startswith(b"%PDF-")
    assert len(re.findall(rb"/Type\s*/Page(?![a-zA-Z])", pdf)) == 1     # one page
    assert b"CreationDate" not in pdf
    assert b"/FontFile2" in pdf and b"/Type3" not in pdf     # TrueType embedded
    root = ET.fromstring(svg)
    assert root.tag.endswith("svg")
    assert b"<dc:date>" not in svg
    assert b"<text" not in svg                              # text drawn as paths


def test_save_figure_rejects_unknown_format(results):
    fig = figures.prior_map(results["prior"])
    with pytest.raises(InputError, match="'eps'"):
        figures.save_figure(fig, ("png", "eps"))


# ----------------------------------------------------------------------------- data read by figures
@pytest.mark.parametrize("name", SWEEPS)
def test_frontier_agrees_with_the_breakdown_of_the_sweep(results, name):
    sweep = results[name]
    f = sweep.frontier
    doc = sweep.to_dict()["frontier"]
    assert len(doc) == f.threshold.size >= FRONTIER_POINTS
    i = int(np.flatnonzero(f.threshold == sweep.breakdown.threshold)[0])
    expected = sweep.breakdown.scale
    assert f.scale[i] == (math.inf if expected is None else expected)
    lower = [-math.inf if v is None else v for v in sweep.breakdown.direct_lower]
    upper = [math.inf if v is None else v for v in sweep.breakdown.direct_upper]
    assert f.direct_lower[i].tolist() == lower and f.direct_upper[i].tolist() == upper
    assert np.all(np.diff(f.threshold) > 0)
    assert set(np.unique(f.side)) <= {-1, 0, 1}
    assert doc[i]["conclusion"] in {">", "<", "none"}


def test_frontier_is_the_inverse_of_the_union_curve():
    # union lower end at scale t*(θ) equals θ (common practice, no source)
    quad = np.array([[0.04, 0.01], [0.01, 0.2]])
    core = Core("x", ("z",), 1.0, np.array([0.8]), quad, 1.96)
    vertices = np.array([[-0.5], [0.5]])
    thetas = np.array([-1.0, 0.0, 0.5, 1.0, 1.5, 2.0, 3.0])
    f = breakdown_frontier(core, vertices, thetas)
    for theta, t, side in zip(thetas, f.scale, f.side):
        if side == 0:
            assert t == 0.0
            continue
        if math.isinf(t):
            continue
        u = union_interval(core, vertices, t)
        end = u.low if side > 0 else u.high
        assert end == pytest.approx(theta, rel=1e-9, abs=1e-12)
        # just inside the breakdown the conclusion still holds
        inner = union_interval(core, vertices, 0.999 * t)
        assert (inner.low > theta) if side > 0 else (inner.high < theta)


def test_extended_curve_reaches_the_threshold(results):
    sweep = results["beyond"]
    ext = sweep.curve_extended
    t_star = sweep.breakdown.scale
    assert ext.scale[0] == 0.0
    assert ext.scale[-1] == pytest.approx(bounds.EXTEND_FACTOR * t_star)
    theta = sweep.breakdown.threshold
    side = 1 if sweep.estimate > theta else -1
    end = ext.lower if side > 0 else ext.upper
    assert side * (end[0] - theta) > 0 > side * (end[-1] - theta)
    assert sweep.to_dict()["curve_extended"][0].keys() == sweep.to_dict()["curve"][0].keys()
    assert results["within"].curve_extended is None
    assert results["within"].to_dict()["curve_extended"] is None


def test_prior_map_matches_the_closed_form_interval():
    # each cell equals sensiv.sensitivity.prior.normal_interval at that prior (Conley, Hansen & Rossi
    # 2012 closed form)
    core = Core("x", ("z",), 0.7, np.array([-2.0]), np.diag([0.01, 0.0]), 1.96)
    pm = prior.prior_map(core, np.array([0.05]), np.array([[0.03**2]]), 0.2, points=9)
    assert pm.given == (0.05, pytest.approx(0.03))
    assert pm.mean[0] < 0.05 < pm.mean[-1] and pm.sd[0] == 0.0
    for i in (0, 4, 8):
        for j in (0, 3, 8):
            interval, _ = prior.normal_interval(core, np.array([pm.mean[j]]),
                                                np.array([[pm.sd[i] ** 2]]))
            assert pm.lower[i, j] == pytest.approx(interval.low, rel=1e-12)
            assert pm.upper[i, j] == pytest.approx(interval.high, rel=1e-12)
            assert pm.excludes[i, j] == (not interval.contains(0.2))
    assert np.array_equal(pm.margin > 0, pm.excludes)
    assert pm.margin.min() < 0 < pm.margin.max()       # the boundary lies on the map


def test_prior_map_in_result_and_json(results):
    res = results["prior"]
    pm = res.prior_map
    assert pm.axis == "direct effect" and pm.threshold == 0.0
    assert pm.given == (0.0, 0.05)
    doc = res.to_dict()["prior_map"]
    assert len(doc["excludes"]) == len(doc["sd"]) == prior.PRIOR_MAP_POINTS
    assert len(doc["excludes"][0]) == len(doc["mean"]) == prior.PRIOR_MAP_POINTS
    two = results["prior_two"].prior_map
    assert two.axis == "bias"


def test_prior_threshold_is_validated():
    frame, spec = design()
    with pytest.raises(InputError, match="threshold"):
        prior.prior_analysis(frame, spec, priors=["normal:0:0.1"], threshold=math.nan)


# ============================================================================ published, calibrate
# Results built with the library: an invented published table (not from any paper) and the
# invented irrigation example data.
EXAMPLE = Path(__file__).resolve().parents[2] / "examples" / "irrigation.csv"
TABLE = dict(estimate=0.75, se=0.25, first_stage=4.2, first_stage_se=0.6)  # invented table


def irrigation_spec():
    return Spec("maize_yield", ["irrigation_hours"], ["height_m"],
                controls=["plot_ha", "soil"], cluster="village")


def two_instruments(n=800, seed=4):
    """Invented: controls that move instruments and outcome; ``nofs`` rows have no first
    stage."""
    rng = np.random.default_rng(seed)
    w1, w2 = rng.normal(size=n), rng.normal(size=n)
    z = rng.normal(size=(n, 2)) + 0.6 * w1[:, None]
    nofs = (rng.uniform(size=n) < 0.3).astype(int)
    x = (1 - nofs) * (z @ np.array([0.8, 0.5])) + 0.5 * w1 + rng.normal(size=n)
    y = 1.0 + 0.5 * x + z @ np.array([0.1, 0.05]) + 0.7 * w1 - 0.3 * w2 + rng.normal(size=n)
    frame = pd.DataFrame({"y": y, "x": x, "z1": z[:, 0], "z2": z[:, 1], "w1": w1, "w2": w2,
                          "nofs": nofs})
    return frame, Spec("y", ["x"], ["z1", "z2"], controls=["w1", "w2"])


@pytest.fixture(scope="module")
def extra():
    from sensiv.sensitivity.calibrate import calibrate
    from sensiv.sensitivity.published import published_analysis

    clay = pd.read_csv(EXAMPLE).assign(clay=lambda f: (f["soil"] == "clay").astype(int))
    frame2, spec2 = two_instruments()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return {
            # backed-out covariance, prior, breakdown beyond the stated range
            "published": published_analysis(**TABLE, reduced_form=3.15, reduced_form_se=0.95,
                                            n=212, direct=["-0.25:0.25rf"],
                                            prior=["normal:0:0.5"]),
            # worst case (no reduced-form se), asymmetric range, breakdown within it, no n
            "published_worst": published_analysis(**TABLE, direct=["-1:0.5"], threshold=0.2),
            # first stage not significant: unbounded union, breakdown at zero
            "published_weak": published_analysis(estimate=0.75, se=0.6, first_stage=4.2,
                                                 first_stage_se=2.8, direct=["-0.1:0.1"]),
            "calibrate": calibrate(EXAMPLE, irrigation_spec()),
            "calibrate_zfs": calibrate(clay, irrigation_spec(), no_first_stage_group="clay",
                                       groups={"terrain": ["plot_ha", "soil"]}),
            "calibrate_two": calibrate(frame2, spec2, no_first_stage_group="nofs"),
        }


PUBLISHED = ["published", "published_worst", "published_weak"]


def caption_words(fig) -> str:
    """The caption with its line breaks (and non-breaking spaces) read as single spaces."""
    return " ".join(" ".join(t.get_text() for t in fig.texts).split())

CALIBRATIONS = ["calibrate", "calibrate_zfs", "calibrate_two"]
NEW_FIGURES = [(figures.sensitivity_curve, p) for p in PUBLISHED] + \
              [(figures.breakdown_frontier, p) for p in PUBLISHED] + \
              [(figures.calibration_yardsticks, c) for c in CALIBRATIONS]


@pytest.mark.parametrize("draw, name", NEW_FIGURES,
                         ids=[f"{f.__name__}-{n}" for f, n in NEW_FIGURES])
def test_new_figure_renders_without_touching_its_input(extra, draw, name):
    test_figure_renders_without_touching_its_input(extra, draw, name)


def test_published_curve_draws_the_result(extra):
    res = extra["published"]
    assert res.breakdown.scale > 1.0 and res.curve_extended is not None
    fig = figures.sensitivity_curve(res)
    ax = fig.axes[0]
    e = res.direct_set.high              # symmetric range: the x unit is its upper end
    (marker,) = gid_lines(fig, "breakdown")
    assert marker.get_xdata()[0] == pytest.approx(res.breakdown.scale * e, rel=REL)
    assert marker.get_ydata()[0] == res.breakdown.threshold
    assert max(ax.get_xlim()) == pytest.approx(res.curve_extended.scale[-1] * e)
    (ident,) = gid_lines(fig, "identified")
    ys = ident.get_paths()[0].vertices[:, 1]
    assert ys.max() == pytest.approx(res.curve_extended.id_upper.max(), rel=REL)
    assert ys.min() == pytest.approx(res.curve_extended.id_lower.min(), rel=REL)
    caption = caption_words(fig)
    assert "From printed numbers" in caption and "backed out" in caption
    assert "n = 212" in caption


def test_published_worst_case_curve_and_weak_first_stage(extra):
    worst = extra["published_worst"]
    fig = figures.sensitivity_curve(worst)
    (marker,) = gid_lines(fig, "breakdown")
    assert marker.get_xdata()[0] == pytest.approx(worst.breakdown.scale * worst.direct_set.low,
                                                  rel=REL)
    caption = caption_words(fig)
    assert "worst case" in caption and "n not printed" in caption
    weak = extra["published_weak"]
    assert not weak.union_ci.bounded and weak.breakdown.scale == 0.0
    fig = figures.sensitivity_curve(weak)
    (band,) = gid_lines(fig, "union")
    assert band.get_hatch()
    assert all(math.isfinite(v) for v in fig.axes[0].get_ylim())


@pytest.mark.parametrize("name", ["published", "published_worst"])
def test_published_frontier_draws_the_result(extra, name):
    res = extra[name]
    fig = figures.breakdown_frontier(res)
    (line,) = gid_lines(fig, "frontier")
    np.testing.assert_allclose(line.get_ydata(), res.frontier.threshold)
    (marker,) = gid_lines(fig, "breakdown")
    assert marker.get_ydata()[0] == res.breakdown.threshold
    assert "β > θ holds" in " ".join(t.get_text() for t in fig.axes[0].texts)


@pytest.mark.parametrize("name", PUBLISHED)
def test_published_frontier_agrees_with_its_breakdown(extra, name):
    # common practice, no source: the frontier row at the examined threshold repeats the
    # single-threshold breakdown (worst case: least favourable of the two correlations)
    res = extra[name]
    f = res.frontier
    i = int(np.flatnonzero(f.threshold == res.breakdown.threshold)[0])
    expected = res.breakdown.scale
    assert f.scale[i] == pytest.approx(math.inf if expected is None else expected, rel=1e-12)
    lower = [-math.inf if v is None else v for v in res.breakdown.direct_lower]
    upper = [math.inf if v is None else v for v in res.breakdown.direct_upper]
    np.testing.assert_allclose(f.direct_lower[i], lower, rtol=1e-12)
    np.testing.assert_allclose(f.direct_upper[i], upper, rtol=1e-12)
    doc = res.to_dict()
    assert len(doc["frontier"]) == f.threshold.size
    assert (doc["curve_extended"] is None) == (res.curve_extended is None)


def test_published_frontier_without_a_conclusion_names_no_region(extra):
    # first stage not significant: the conclusion holds at no direct effect, so no lobe
    fig = figures.breakdown_frontier(extra["published_weak"])
    words = " ".join(t.get_text() for t in fig.axes[0].texts)
    assert "holds" not in words and "fails" in words


def test_published_extended_curve_reaches_the_threshold(extra):
    res = extra["published"]
    ext = res.curve_extended
    assert ext.scale[-1] == pytest.approx(bounds.EXTEND_FACTOR * res.breakdown.scale)
    theta = res.breakdown.threshold
    assert ext.lower[0] > theta > ext.lower[-1]
    # the extended curve repeats the stated one where they overlap (same cores)
    assert ext.lower[0] == res.curve.lower[0] and ext.id_upper[0] == res.curve.id_upper[0]
    assert extra["published_worst"].curve_extended is None


def test_direct_effect_figures_refuse_other_results(extra):
    with pytest.raises(InputError, match="sweep or a published"):
        figures.sensitivity_curve(extra["calibrate"])


def test_summary_intervals_take_published_rows(extra, results):
    pub = extra["published"]
    rows = summary_rows([pub])
    assert rows == figures.published_items(pub)
    assert [r.label for r in rows] == ["identified set", "union of 95% intervals",
                                       "bias-aware 95% interval",
                                       "weak-IV-robust 95% set", "95% prior interval"]
    assert all(r.assumption.startswith("from printed numbers") for r in rows)
    assert [r.pieces for r in rows] == [(pub.identified_set,), (pub.union_ci,),
                                        (pub.bias_aware.ci,), pub.ar_set,
                                        (pub.prior.interval,)]
    assert rows[2].point == pub.bias_aware.estimate
    assert rows[-1].point == pub.prior.center
    items = [results["within"], pub, extra["calibrate"]]
    before = [snapshot(r) for r in items]
    fig = figures.summary_intervals(summary_rows(items), threshold=summary_threshold(items),
                                    xlabel=summary_xlabel(items))
    assert [snapshot(r) for r in items] == before
    xlo, xhi = fig.axes[0].get_xlim()
    lines = gid_lines(fig, "row:weak-IV-robust 95% set")
    assert [list(line.get_xdata()) for line in lines][-1] == pytest.approx(
        [max(pub.ar_set[-1].low, xlo), min(pub.ar_set[-1].high, xhi)])
    assert summary_rows([extra["calibrate"]]) == []     # no effect of the treatment


def test_calibration_figure_draws_yardsticks_and_zero_first_stage(extra):
    cal = extra["calibrate_zfs"]
    fig = figures.calibration_yardsticks(cal)
    for b in cal.yardsticks:
        (bar,) = gid_lines(fig, f"yardstick:{b.name}:{b.instrument}")
        assert bar.get_width() == b.implied_direct and bar.get_x() == 0.0
    z = cal.zero_first_stage
    (line,) = gid_lines(fig, "zero-first-stage:height_m")
    assert list(line.get_xdata()) == [z.interval[0].low, z.interval[0].high]
    assert z.interval[0].contains(float(z.direct[0]))
    ax = fig.axes[0]
    assert ax.get_xlim()[0] < z.interval[0].low and "height_m" in ax.get_xlabel()
    (top,) = ax.child_axes                      # the secondary x-axis
    assert "share of |reduced form|" in top.get_xlabel()
    caption = caption_words(fig)
    assert "not the true direct effect" in caption and "premise looks false" in caption
    row_texts = " ".join(t.get_text() for t in ax.texts)
    assert "without terrain (plot_ha, soil)" in row_texts


def test_calibration_figure_with_several_instruments_uses_shares(extra):
    cal = extra["calibrate_two"]
    fig = figures.calibration_yardsticks(cal)
    for b in cal.yardsticks:
        (bar,) = gid_lines(fig, f"yardstick:{b.name}:{b.instrument}")
        assert bar.get_width() == b.implied_direct_rf
    z = cal.zero_first_stage
    for k, name in enumerate(z.instruments):
        (line,) = gid_lines(fig, f"zero-first-stage:{name}")
        assert list(line.get_xdata()) == [z.interval_rf[k].low, z.interval_rf[k].high]
    assert not fig.axes[0].child_axes and "share" in fig.axes[0].get_xlabel()


def test_calibration_figure_needs_something_to_draw(extra):
    from sensiv.sensitivity.calibrate import calibrate

    bare = calibrate(EXAMPLE, Spec("maize_yield", ["irrigation_hours"], ["height_m"]))
    assert not bare.yardsticks and bare.zero_first_stage is None
    with pytest.raises(InputError, match="nothing to draw"):
        figures.calibration_yardsticks(bare)


def test_zero_first_stage_interval_in_result_and_json(extra):
    # common practice, no source: estimate ± critical value × se; the share of the reduced
    # form divides both ends by it
    z = extra["calibrate_zfs"].zero_first_stage
    rf = float(extra["calibrate_zfs"].scale.reduced_form[0])
    d, s = float(z.direct[0]), float(z.se[0])
    assert (z.interval[0].low, z.interval[0].high) == pytest.approx(
        (d - z.critical * s, d + z.critical * s), rel=1e-12)
    assert (z.interval_rf[0].low, z.interval_rf[0].high) == pytest.approx(
        tuple(sorted((z.interval[0].low / rf, z.interval[0].high / rf))), rel=1e-12)
    doc = z.to_dict()
    assert doc["direct_ci"]["height_m"] == z.interval[0].to_list()
    assert doc["direct_ci_rf"]["height_m"] == z.interval_rf[0].to_list()


def test_new_figures_draw_into_given_axes(extra):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(7, 3))
    FigureCanvasAgg(fig)
    left, right = fig.subplots(1, 2)
    assert figures.sensitivity_curve(extra["published"], ax=left) is fig
    assert figures.calibration_yardsticks(extra["calibrate_zfs"], ax=right) is fig
    assert right.get_legend() is not None


@pytest.mark.parametrize("draw, name", [(figures.breakdown_frontier, "published"),
                                        (figures.calibration_yardsticks, "calibrate_zfs")])
def test_new_figures_save_to_identical_bytes(extra, draw, name):
    first = figures.save_figure(draw(extra[name]), figures.FORMATS)
    second = figures.save_figure(draw(extra[name]), figures.FORMATS)
    assert first == second
    assert first["png"].startswith(b"\x89PNG") and first["pdf"].startswith(b"%PDF-")


# ------------------------------------------------------------------ duplicate rows, stable bytes
def test_rows_equal_but_for_the_last_bits_are_drawn_once():
    # Common practice, no source: the same set computed twice differs only in rounding.
    low, high = -0.1234567, 0.75
    twin = figures.SummaryItem("Anderson–Rubin 95% set", (Interval(low, high),), "exact")
    close = figures.SummaryItem("Anderson–Rubin 95% set",
                                (Interval(np.nextafter(low, 0.0), np.nextafter(high, 2.0)),),
                                "exact")
    apart = figures.SummaryItem("Anderson–Rubin 95% set", (Interval(low, high * 1.001),),
                                "exact")
    other = figures.SummaryItem("2SLS, 95% CI", (Interval(low, high),), "exact")
    assert close != twin and figures.distinct_rows([twin, close]) == [twin]
    assert figures.distinct_rows([twin, apart, other, close]) == [twin, apart, other]
    unbounded = figures.SummaryItem("AR", (Interval(-math.inf, 1.0),), "exact")
    assert figures.distinct_rows([unbounded, unbounded]) == [unbounded]
    assert len(figures.distinct_rows(
        [unbounded, figures.SummaryItem("AR", (Interval(-1e300, 1.0),), "exact")])) == 2


def test_figures_are_byte_identical_across_processes(tmp_path):
    # Two separate runs (different hash seeds) give the same PNG, SVG and PDF bytes.
    import os

    root = Path(__file__).resolve().parents[2]
    bundles = []
    for hash_seed in ("1", "2"):
        out = tmp_path / f"run{hash_seed}"
        env = {**os.environ, "PYTHONHASHSEED": hash_seed, "PYTHONPATH": os.pathsep.join(
            [str(root), *filter(None, [os.environ.get("PYTHONPATH")])])}
        subprocess.run([sys.executable, "-m", "sensiv", "published", "--estimate", "1",
                        "--se", "0.2", "--first-stage", "1", "--first-stage-f", "20",
                        "--direct=0:0.1", "--points", "5", "--out", str(out), "--format", "png",
                        "--format", "svg", "--format", "pdf"], env=env, check=True,
                       capture_output=True)
        bundles.append({p.name: p.read_bytes() for p in sorted(out.iterdir())})
    names = set(bundles[0])
    assert {n.rsplit(".", 1)[-1] for n in names} >= {"png", "svg", "pdf"}
    assert bundles[0] == bundles[1]


def test_summary_rows_carry_both_bias_aware_intervals():
    # common practice, no source: with two instruments the optimally weighted interval gets
    # its own row when shorter; the rows draw exactly the result's intervals
    rng = np.random.default_rng(11)
    z = rng.normal(size=(300, 2))
    x = z @ [0.8, 0.4] + rng.normal(size=300)
    frame = pd.DataFrame({"y": 0.5 * x + rng.normal(size=300), "x": x, "z1": z[:, 0],
                          "z2": z[:, 1]})
    spec = Spec(outcome="y", treatments=("x",), instruments=("z1", "z2"))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = bounds.sweep(frame, spec, direct=["-0.05:0.05", "0:0.02"], points=3)
    rows = {r.label: r for r in figures.sweep_items(res)}
    assert rows["bias-aware 95% interval"].pieces == (res.bias_aware.ci,)
    opt = res.bias_aware_optimal
    assert opt.length_ratio < 1                   # this design gains a little from weighting
    assert rows["bias-aware 95%, optimal weights"].pieces == (opt.interval.ci,)
    assert rows["bias-aware 95%, optimal weights"].point == opt.interval.estimate
