"""Results in a notebook: ``_repr_html_`` is the results table in HTML, ``plot()`` the Figure
of the result's figure kind (the same bytes as the ``--out`` figure file), ``to_frame()`` the
curve or table as a pandas DataFrame with the result's own numbers (common practice for
notebook display of result objects, no source)."""

from __future__ import annotations

import math
import warnings
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from matplotlib.figure import Figure

import sensiv
from sensiv.analyses.outputs import figure_files, results_table
from sensiv.core.errors import InputError
from sensiv.partial_id.discrete import discrete_bounds
from sensiv.partial_id.discrete_data import from_counts
from sensiv.present.figures import save_figure
from sensiv.present.tables import CSV_COLUMNS

ROOT = Path(__file__).resolve().parents[2]
PATH = ROOT / "examples" / "irrigation.csv"   # invented demo data
ROLES = dict(outcome="maize_yield", treatment="irrigation_hours", instruments="height_m",
             controls=["plot_ha", "soil"], cluster="village")


@pytest.fixture(scope="module")
def results():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return {
            "fit": sensiv.fit(PATH, **ROLES),
            "sweep": sensiv.sweep(PATH, **ROLES, direct="-0.005:0.005"),
            "prior": sensiv.prior(PATH, **ROLES, prior="normal:0:0.002"),
            "corrbound": sensiv.corrbound(PATH, **ROLES, reps=0, points=5, progress=False),
            "calibrate": sensiv.calibrate(PATH, **ROLES),
            "discrete": discrete_bounds(from_counts([[[300, 60], [20, 20]],
                                                     [[60, 40], [40, 380]]]),
                                        budget=0.1, reps=0, points=5, progress=False),
        }


class Cells(HTMLParser):
    """Rows of the first HTML table, as lists of cell texts."""

    def __init__(self):
        super().__init__()
        self.rows, self._row, self._in = [], None, False

    def handle_starttag(self, tag, attrs):
        if tag == "tr":
            self._row = []
        elif tag in ("td", "th"):
            self._in = True
            self._row.append("")

    def handle_endtag(self, tag):
        if tag == "tr":
            self.rows.append(self._row)
        elif tag in ("td", "th"):
            self._in = False

    def handle_data(self, data):
        if self._in:
            self._row[-1] += data


KINDS = ["fit", "sweep", "prior", "corrbound", "calibrate", "discrete"]


@pytest.mark.parametrize("name", KINDS)
def test_html_is_the_results_table_with_assumptions_and_caution(results, name):
    result = results[name]
    page = result._repr_html_()
    parser = Cells()
    parser.feed(page)
    table = results_table(result)
    assert len(parser.rows) == 1 + len(table.rows)
    assert [row[0] for row in parser.rows[1:]] == [row.analysis for row in table.rows]
    for caution in table.cautions:
        assert caution.replace("'", "&#x27;") in page
    assert "Assumptions" in page


@pytest.mark.parametrize("name", KINDS)
def test_plot_is_the_figure_file_of_its_kind(results, name):
    result = results[name]
    fig = result.plot()
    assert isinstance(fig, Figure)
    files = figure_files(result, ("png",))
    first = next(iter(files))
    assert save_figure(fig, ("png",))["png"] == files[first]


def test_plot_by_name_and_unknown_name(results):
    sweep = results["sweep"]
    frontier = sweep.plot("frontier")
    assert save_figure(frontier, ("png",))["png"] == \
        figure_files(sweep, ("png",))["sweep-frontier.png"]
    with pytest.raises(InputError, match="'curve', 'frontier'"):
        sweep.plot("map")


def test_sweep_frame_is_its_curve(results):
    sweep = results["sweep"]
    frame = sweep.to_frame()
    assert list(frame.columns) == ["scale", "lower", "upper", "id_lower", "id_upper",
                                   "ba_lower", "ba_upper"]
    np.testing.assert_array_equal(frame["upper"].to_numpy(), sweep.curve.upper)
    assert frame["scale"].iloc[-1] == 1.0
    assert (frame["lower"].iloc[-1], frame["upper"].iloc[-1]) == \
        (sweep.union_ci.low, sweep.union_ci.high)


def test_corrbound_and_discrete_frames_are_their_curves(results):
    corr = results["corrbound"].to_frame()
    assert list(corr.columns) == ["max_ratio", "lower", "upper"]
    assert corr["lower"].tolist() == [p.hull.low for p in results["corrbound"].curve]
    discrete = results["discrete"]
    frame = discrete.to_frame()
    assert frame["budget"].tolist() == [p.budget for p in discrete.curve]
    assert frame["upper"].tolist() == [p.bounds.high if p.bounds else math.nan
                                       for p in discrete.curve]


@pytest.mark.parametrize("name", ["fit", "prior", "calibrate"])
def test_other_frames_are_the_table(results, name):
    result = results[name]
    frame = result.to_frame()
    assert tuple(frame.columns) == CSV_COLUMNS
    table = results_table(result)
    assert frame["analysis"].tolist() == [r.analysis for r in table.rows]
    assert frame["estimate"].tolist() == pytest.approx(
        [math.nan if r.estimate is None else r.estimate for r in table.rows], nan_ok=True)


def test_an_unbounded_end_stays_infinite_in_the_frame():
    # a weak first stage: the union is unbounded (curve ends are ±inf), never a large number
    rng = np.random.default_rng(3)
    import pandas as pd

    z = rng.normal(size=400)
    x = 0.01 * z + rng.normal(size=400)
    frame = pd.DataFrame({"y": x + rng.normal(size=400), "x": x, "z": z})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        weak = sensiv.sweep(frame, outcome="y", treatment="x", instruments="z",
                            direct="-0.1:0.1")
    assert np.isinf(weak.to_frame()["upper"]).all()
    assert weak._repr_html_().count("+∞") >= 1
