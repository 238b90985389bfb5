"""Figures and words of the per-instrument sensitivity analyses (drawn from the results; the
numbers they show are the results' own — common practice, no source)."""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

from sensiv.present import text_per_instrument as words
from sensiv.present.figures import save_figure
from sensiv.present.figures.per_instrument import per_instrument_curve, per_instrument_prior_map
from sensiv.sensitivity.invalid_count import invalid_count
from sensiv.sensitivity.per_instrument import direct_effects
from sensiv.sensitivity.per_instrument_prior import prior_effects

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "sensitivity"))
from test_per_instrument import table  # noqa: E402


def by_gid(fig, gid):
    return [a for a in fig.findobj() if getattr(a, "get_gid", lambda: None)() == gid]


def test_curve_marks_the_breakdown_in_the_users_unit():
    res = direct_effects(table(8), "-2:2se")
    fig = per_instrument_curve(res)
    (marker,) = by_gid(fig, "breakdown")
    assert marker.get_xdata()[0] == pytest.approx(res.breakdown.scale * 2.0)
    assert marker.get_ydata()[0] == 0.0
    assert by_gid(fig, "union") and by_gid(fig, "identified")
    assert len(by_gid(fig, "bias_aware")) == 2
    ax = fig.axes[0]
    assert "reduced-form SEs" in ax.get_xlabel()
    # the curve runs past the stated range to the breakdown
    assert ax.get_xlim()[1] > res.breakdown.scale * 2.0
    assert save_figure(fig)["png"].startswith(b"\x89PNG")


def test_curve_without_breakdown_says_so_and_polytope_uses_the_scale():
    res = direct_effects(table(12), "-1:0se")
    fig = per_instrument_curve(res)
    assert not by_gid(fig, "breakdown")
    assert any("Breakdown: none" in t.get_text() for t in fig.texts)


def test_prior_map_marks_the_analysed_prior():
    res = prior_effects(table(8), "normal:0.5:1se", points=15)
    fig = per_instrument_prior_map(res)
    (given,) = by_gid(fig, "given")
    assert (given.get_xdata()[0], given.get_ydata()[0]) == (0.5, 1.0)
    assert by_gid(fig, "boundary") and by_gid(fig, "kept")
    assert "balanced" in " ".join(t.get_text() for t in fig.texts)


def test_text_states_the_numbers_of_the_results():
    assoc = table(8)
    res = direct_effects(assoc, "-1:1se")
    lines = words.direct_effects_lines(res)
    assert str(res.union_ci) in "\n".join(lines)
    assert any("3.111" in line for line in lines)          # the breakdown, 4 digits
    prior = prior_effects(assoc, "normal:0:1se")
    assert str(prior.interval) in "\n".join(words.prior_effects_lines(prior))
    count = invalid_count(assoc)
    sentence = words.invalid_count_sentence(count)
    assert f"whichever {count.count} of the {assoc.count}" in sentence and "(exact)" in sentence
    assert words.invalid_count_cells(count)[0][1].startswith(f"{count.count} of")
    none = invalid_count(assoc, threshold=float(res.core.estimate))
    assert "none" in words.invalid_count_sentence(none)
    assert np.isfinite(res.core.se)
