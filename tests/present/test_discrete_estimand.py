"""Discrete bounds say which average they bound and that it is not the 2SLS estimand.

Source: Balke & Pearl (1997) bound the average effect over the whole population; 2SLS
estimates a complier average under monotonicity (Imbens & Angrist 1994) — the wording checks
are common practice, no source.
"""

from __future__ import annotations

import pytest

from sensiv.partial_id.discrete import discrete_bounds
from sensiv.partial_id.discrete_data import from_counts
from sensiv.present import figures
from sensiv.present.table_rows import discrete_rows


@pytest.fixture(scope="module")
def result():
    # invented counts (z, x, y): a design check, not a reference
    return discrete_bounds(from_counts([[[300, 60], [20, 20]], [[100, 40], [60, 220]]]),
                           budget=0.05, reps=0)


def test_table_row_names_the_average_and_the_other_estimand(result):
    row = discrete_rows(result)[0]
    assert "average effect over all units, Σ_z P̂(z)·E[Y(1,z) − Y(0,z)]" in row.assumption
    assert "not the complier effect that 2SLS estimates" in row.assumption


def test_figure_says_the_estimand_and_keeps_the_interval_bar_visible(result):
    import matplotlib

    matplotlib.use("Agg")
    fig = figures.discrete_curve(result)
    texts = " ".join(t.get_text() for t in fig.texts)
    assert "Estimand: the average effect over everyone" in " ".join(texts.split())
    ax = fig.axes[0]
    marks = [a for a in ax.get_lines() if a.get_gid() == "budget"]
    assert len(marks) == 1 and marks[0].get_marker() == "^"
    # no full-height vertical line at the analysed budget over the interval bar
    assert not [a for a in ax.get_lines()
                if list(a.get_xdata()) == [result.budget, result.budget]
                and a.get_gid() != "ci"]
