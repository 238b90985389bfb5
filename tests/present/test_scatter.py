"""The per-instrument scatter and the report text of a per-instrument analysis (drawn from the
result only; checks of designed properties on the INVENTED demo table)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from sensiv.analyses import per_instrument
from sensiv.present.figures.scatter import per_instrument_scatter
from sensiv.present.text_published_table import per_instrument_markdown

TABLE = Path(__file__).resolve().parents[2] / "examples" / "per_instrument.csv"   # INVENTED
COLUMNS = {"first_stage": "beta_exposure", "first_stage_se": "se_exposure",
           "reduced_form": "beta_outcome", "reduced_form_se": "se_outcome"}


@pytest.fixture(scope="module")
def result():
    return per_instrument.analyse(TABLE, COLUMNS, "variant", seed=4, reps=50,
                                  direct="-1:1se", prior="normal:0:1se")


def test_scatter_draws_every_instrument_and_the_fitted_lines(result):
    fig = per_instrument_scatter(result)
    ax = fig.axes[0]
    labels = [line.get_label() for line in ax.get_lines()]
    for word in ("IVW", "MR-Egger", "weighted median", "mode"):
        assert any(label.startswith(word) for label in labels), word
    ivw_line = next(l for l in ax.get_lines() if l.get_label().startswith("IVW"))
    x, y = ivw_line.get_data()
    assert y[0] == 0.0 and y[1] / x[1] == pytest.approx(result.ivw.estimate)   # through 0
    egger = next(l for l in ax.get_lines() if l.get_label().startswith("MR-Egger"))
    assert egger.get_ydata()[0] == pytest.approx(result.yardsticks.egger.intercept)
    points = ax.containers[0].lines[0].get_xydata()
    assert len(points) == result.associations.count and np.all(points[:, 0] > 0)  # oriented


def test_markdown_report_states_assumptions_and_caution(result):
    text = per_instrument_markdown(result)
    for word in ("## Yardsticks", "## Sensitivity", "## Assumptions", "population structure",
                 "assortative mating", "proves any instrument valid", "v25"):
        assert word in text, word
    assert str(result).startswith("Per-instrument analysis")
