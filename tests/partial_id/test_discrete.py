"""Discrete bounds with an exclusion-violation budget (sensiv.partial_id.discrete*).

Outside checks: the Balke & Pearl (1997) closed-form bounds and their vitamin A example, and
Pearl's (1995) instrumental inequality.  Everything else is an invariant of the model (common
practice, no source) or a value derived by hand in the comment beside it.
"""

from __future__ import annotations

import itertools
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from sensiv.cli.app import app
from sensiv.data import Spec, from_frame
from sensiv.core.errors import InputError
from sensiv.partial_id.discrete import discrete_bounds, instrumental_inequality
from sensiv.partial_id.discrete_data import (counts_from_frame, from_counts, read_counts,
                                             tabulate)
from sensiv.partial_id.discrete_programme import Programmes, curve
from sensiv.partial_id.discrete_types import is_defier, x_types

ROOT = Path(__file__).resolve().parents[2]
NUDGE = ROOT / "examples" / "nudge.csv"
NUDGE_ROLES = ("--outcome", "bp_controlled", "--treatment", "screened", "--instrument", "sms")
LP_TOL = 1e-7  # solver accuracy on these small programmes (common practice, no source)
runner = CliRunner()


# --------------------------------------------------------------------------- helpers
def balke_pearl(p: np.ndarray) -> tuple[float, float]:
    """Balke & Pearl (1997, JASA 92, "Bounds on treatment effects from studies with imperfect
    compliance"), closed-form ACE bounds for binary Z, X, Y: the maximum of eight expressions
    (lower) and the minimum of eight (upper), written in p_{yx.z} = P(y, x | z) — from memory.
    ``p`` is indexed [z, x, y]."""
    def q(y, x, z):
        return p[z, x, y]

    lower = max(
        q(1, 1, 1) + q(0, 0, 0) - 1,
        q(1, 1, 0) + q(0, 0, 1) - 1,
        q(1, 1, 0) - q(1, 1, 1) - q(1, 0, 1) - q(0, 1, 0) - q(1, 0, 0),
        q(1, 1, 1) - q(1, 1, 0) - q(1, 0, 0) - q(0, 1, 1) - q(1, 0, 1),
        -q(0, 1, 1) - q(1, 0, 1),
        -q(0, 1, 0) - q(1, 0, 0),
        q(0, 0, 1) - q(0, 1, 1) - q(1, 0, 1) - q(0, 1, 0) - q(0, 0, 0),
        q(0, 0, 0) - q(0, 1, 0) - q(1, 0, 0) - q(0, 1, 1) - q(0, 0, 1),
    )
    upper = min(
        1 - q(0, 1, 1) - q(1, 0, 0),
        1 - q(0, 1, 0) - q(1, 0, 1),
        -q(0, 1, 0) + q(0, 1, 1) + q(0, 0, 1) + q(1, 1, 0) + q(0, 0, 0),
        -q(0, 1, 1) + q(1, 1, 1) + q(0, 0, 1) + q(0, 1, 0) + q(0, 0, 0),
        q(1, 1, 1) + q(0, 0, 1),
        q(1, 1, 0) + q(0, 0, 0),
        -q(1, 0, 1) + q(1, 1, 1) + q(0, 0, 1) + q(1, 1, 0) + q(1, 0, 0),
        -q(1, 0, 0) + q(1, 1, 0) + q(0, 0, 0) + q(1, 1, 1) + q(1, 0, 1),
    )
    return lower, upper


def conditional(counts) -> np.ndarray:
    counts = np.asarray(counts, dtype=float)
    return counts / counts.sum(axis=(1, 2))[:, None, None]


def type_model(rng, K, J, L, values, violation=0.0, monotone=False, concentration=0.5):
    """Exact P(y, x | z) and the true effect of level J-1 vs 0 from a random response-type
    distribution in which a share ``violation`` of units has an outcome that Z changes.

    Returns conditional shares [z, x, y], P(z) and the true
    sum_z P(z) E[Y(J-1, z) - Y(0, z)] (model definition, common practice, no source)."""
    xt = x_types(K, J)
    if monotone:
        xt = xt[~is_defier(xt)]
    ax = rng.dirichlet(np.full(len(xt), concentration))
    weights = rng.dirichlet(np.full(K, 2.0))
    share = np.zeros((K, J, L))
    truth = 0.0
    n_plain = 12
    for mass, kind in ((1.0 - violation, "plain"), (violation, "violating")):
        if mass == 0:
            continue
        # A handful of random Y-types of this kind, each with random X-type mixing.
        for _ in range(n_plain):
            if kind == "plain":
                g = rng.integers(0, L, size=J)
                yt = np.repeat(g[:, None], K, axis=1)
            else:
                yt = rng.integers(0, L, size=(J, K))
                while not (yt != yt[:, :1]).any():
                    yt = rng.integers(0, L, size=(J, K))
            w = mass / n_plain
            for a, pa in zip(xt, ax):
                for z in range(K):
                    share[z, a[z], yt[a[z], z]] += w * pa
            truth += w * sum(weights[z] * (values[yt[J - 1, z]] - values[yt[0, z]])
                             for z in range(K))
    return share, weights, truth


def counts_of(share: np.ndarray, weights: np.ndarray, n: int = 10**6) -> np.ndarray:
    """Counts whose conditional shares and Z-shares approximate ``share`` and ``weights``."""
    return np.rint(share * weights[:, None, None] * n).astype(np.int64)


def run(table, **options):
    options = {"reps": 0, "points": 5, **options}
    return discrete_bounds(table, **options)


# --------------------------------------------------------------------------- Balke & Pearl
def test_programme_equals_balke_pearl_closed_form_on_random_distributions():
    rng = np.random.default_rng(1997)
    programmes = Programmes((2, 2, 2), [0.0, 1.0])
    checked = 0
    for i in range(300):
        if i % 2:
            share, weights, _ = type_model(rng, 2, 2, 2, np.array([0.0, 1.0]))
        else:  # unstructured draws; keep those that satisfy the instrumental inequality
            share = rng.dirichlet(np.full(4, 0.6), size=2).reshape(2, 2, 2)
            weights = np.array([0.4, 0.6])
        if instrumental_inequality(share, [0, 1]).value > 1:
            continue
        programmes.set_data(share * weights[:, None, None])
        low, high = programmes.interval(1, 0.0, 1.0)
        expected = balke_pearl(share)
        assert low == pytest.approx(expected[0], abs=LP_TOL)
        assert high == pytest.approx(expected[1], abs=LP_TOL)
        checked += 1
    assert checked > 150


def test_public_api_at_zero_budget_equals_balke_pearl():
    rng = np.random.default_rng(7)
    for _ in range(4):
        share, weights, _ = type_model(rng, 2, 2, 2, np.array([0.0, 1.0]))
        counts = counts_of(share, weights)
        result = run(from_counts(counts), budget=0.0)
        expected = balke_pearl(conditional(counts))
        assert result.bounds.low == pytest.approx(expected[0], abs=LP_TOL)
        assert result.bounds.high == pytest.approx(expected[1], abs=LP_TOL)
        assert result.curve[0].bounds.low == pytest.approx(expected[0], abs=LP_TOL)


def test_balke_pearl_vitamin_a_example():
    # Balke & Pearl (1997, JASA), worked example: the vitamin A supplementation trial of
    # Sommer et al. (counts by assignment z, receipt x and survival y), printed bounds
    # -0.1946 <= ACE <= 0.0054 (four decimals) — counts and bounds from memory.
    counts = np.zeros((2, 2, 2), dtype=np.int64)
    counts[0, 0, 0], counts[0, 0, 1] = 74, 11514  # control arm: nobody received vitamin A
    counts[1, 0, 0], counts[1, 0, 1] = 34, 2385
    counts[1, 1, 0], counts[1, 1, 1] = 12, 9663
    result = run(from_counts(counts), budget=0.0)
    assert result.bounds.low == pytest.approx(-0.1946, abs=5e-5)
    assert result.bounds.high == pytest.approx(0.0054, abs=5e-5)
    assert result.inequality.holds


# --------------------------------------------------------------------------- Pearl (1995)
@pytest.mark.parametrize("shape", [(2, 2, 2), (3, 2, 2), (2, 2, 3)])
def test_distributions_violating_the_instrumental_inequality(shape):
    # Built to violate Pearl's (1995) inequality max_x sum_y max_z P(y, x | z) <= 1: at x = 0
    # the outcome is 0 for every unit at z = 0 and 1 for a share t at z = 1.
    K, J, L = shape
    for t in (0.05, 0.3, 1.0):
        share = np.zeros((K, J, L))
        share[0, 0, 0] = 1.0
        share[1:, 0, 1] = t
        share[1:, 0, 0] = 1.0 - t
        counts = counts_of(share, np.full(K, 1.0 / K), n=1000 * K)
        result = run(from_counts(counts), budget=0.0)
        assert result.inequality.value == pytest.approx(1.0 + t)
        assert not result.inequality.holds
        assert result.min_budget > 0
        assert result.bounds is None  # the programme is infeasible at budget 0
        assert any("does not fit" in note for note in result.notes)
        # By hand: every unit has X = 0 and the share t with Y = 1 at z = 1 must be units
        # whose outcome Z changes, so the smallest budget is t (common practice, no source).
        assert result.min_budget == pytest.approx(t, abs=LP_TOL)
        assert run(from_counts(counts), budget=min(1.0, t + 1e-6)).bounds is not None


def test_binary_inequality_is_exactly_the_fit_condition():
    # For binary Z, X, Y the instrumental inequality is also sufficient for the model to fit
    # (Balke & Pearl 1997, from memory): budget 0 fits iff the inequality holds.
    rng = np.random.default_rng(5)
    programmes = Programmes((2, 2, 2), [0.0, 1.0])
    outcomes = set()
    for _ in range(200):
        share = rng.dirichlet(np.full(4, 0.5), size=2).reshape(2, 2, 2)
        programmes.set_data(share)
        value = instrumental_inequality(share, [0, 1]).value
        if abs(value - 1.0) < 1e-6:
            continue
        fits = programmes.min_budget(1.0) == 0.0
        assert fits == (value <= 1.0)
        outcomes.add(fits)
    assert outcomes == {True, False}


# --------------------------------------------------------------------------- invariants
SHAPES = [(2, 2, 2), (3, 2, 2), (2, 2, 3), (4, 2, 4), (2, 3, 2), (3, 3, 2)]


@pytest.mark.parametrize("shape", SHAPES)
def test_bounds_contain_the_truth_when_the_budget_covers_the_violation(shape):
    K, J, L = shape
    rng = np.random.default_rng(sum(shape))
    values = np.sort(rng.choice(np.arange(-3, 8), size=L, replace=False)).astype(float)
    programmes = Programmes(shape, values)
    for violation in (0.0, 0.07, 0.3):
        share, weights, truth = type_model(rng, K, J, L, values, violation)
        programmes.set_data(share * weights[:, None, None])
        min_budget = programmes.min_budget(1.0)
        assert min_budget <= violation + LP_TOL
        low, high = programmes.interval(J - 1, violation, 1.0)
        assert low - LP_TOL <= truth <= high + LP_TOL
        breakdown = programmes.breakdown(J - 1, truth, 1.0)
        assert breakdown <= violation + LP_TOL


@pytest.mark.parametrize("shape", [(2, 2, 2), (3, 2, 3), (2, 3, 2)])
def test_bounds_widen_with_the_budget(shape):
    K, J, L = shape
    rng = np.random.default_rng(11)
    share, weights, _ = type_model(rng, K, J, L, np.arange(L, dtype=float), 0.02)
    result = run(from_counts(counts_of(share, weights)), budget=0.5, points=21)
    for contrast in result.contrasts:
        points = [p for p in contrast.curve if p.bounds is not None]
        assert len(points) >= 19
        lows = np.array([p.bounds.low for p in points])
        highs = np.array([p.bounds.high for p in points])
        assert (np.diff(lows) <= LP_TOL).all() and (np.diff(highs) >= -LP_TOL).all()
        assert highs[-1] - lows[-1] > highs[0] - lows[0]
        # points below the smallest fitting budget have no bounds
        for point in contrast.curve:
            assert (point.bounds is None) == (point.budget < result.min_budget - LP_TOL)


def test_binary_bounds_stay_within_minus_one_and_one():
    rng = np.random.default_rng(3)
    programmes = Programmes((3, 2, 2), [0.0, 1.0])
    for _ in range(30):
        share = rng.dirichlet(np.full(4, 0.4), size=3).reshape(3, 2, 2)
        programmes.set_data(share)
        for budget in (0.5, 1.0):
            pair = programmes.interval(1, budget, 1.0)
            if pair is not None:
                assert -1 - LP_TOL <= pair[0] <= pair[1] <= 1 + LP_TOL
        # with no restriction at all the width is 1 for a binary outcome: each unit's
        # effect at its own z is free in [-1, 1] except for one observed potential outcome
        low, high = programmes.interval(1, 1.0, 1.0)
        assert high - low == pytest.approx(1.0, abs=LP_TOL)


def test_monotonicity_narrows_the_bounds():
    rng = np.random.default_rng(8)
    narrower = 0
    for shape in ((2, 2, 2), (3, 2, 2), (2, 2, 3)):
        K, J, L = shape
        programmes = Programmes(shape, np.arange(L, dtype=float))
        for _ in range(25):
            programmes.set_data(rng.dirichlet(np.full(J * L, 0.7), size=K).reshape(shape))
            start = programmes.min_budget(0.0)
            if start is None:
                continue
            # monotonicity adds testable implications: it never fits at a smaller budget
            assert programmes.min_budget(1.0) <= start + LP_TOL
            for budget in (start, min(1.0, start + 0.05)):
                free = programmes.interval(1, budget, 1.0)
                mono = programmes.interval(1, budget, 0.0)
                half = programmes.interval(1, budget, 0.5)
                assert free[0] - LP_TOL <= half[0] <= mono[0] + LP_TOL
                assert mono[1] - LP_TOL <= half[1] <= free[1] + LP_TOL
                narrower += (mono[1] - mono[0]) < (free[1] - free[0]) - 1e-6
    assert narrower > 0
    # through the public API: monotone data, no defiers needed; defier budget 1 = free model
    share, weights, _ = type_model(rng, 2, 2, 2, np.array([0.0, 1.0]), 0.05, monotone=True)
    table = from_counts(counts_of(share, weights))
    free = run(table, budget=0.1)
    mono = run(table, budget=0.1, monotone=True)
    one = run(table, budget=0.1, monotone=True, defier_budget=1.0)
    assert mono.min_defier_budget == pytest.approx(0.0, abs=1e-6)
    assert free.bounds.low - LP_TOL <= mono.bounds.low <= mono.bounds.high \
        <= free.bounds.high + LP_TOL
    assert one.bounds.low == pytest.approx(free.bounds.low, abs=LP_TOL)
    assert one.bounds.high == pytest.approx(free.bounds.high, abs=LP_TOL)
    assert any("monotonicity" in a for a in mono.assumptions())


def test_monotonicity_contradicted_by_the_data():
    # P(X = 1 | z = 1) = 0.2 < P(X = 1 | z = 0) = 0.5: at least 0.3 of units are defiers
    # (the treated share can only fall through defiers; by hand, common practice, no source).
    counts = np.array([[[25, 25], [25, 25]], [[40, 40], [10, 10]]])
    table = from_counts(counts)
    result = run(table, budget=0.2, monotone=True)
    assert result.min_defier_budget == pytest.approx(0.3, abs=LP_TOL)
    assert result.min_budget is None and result.bounds is None
    assert any("defier" in note for note in result.notes)
    ok = run(table, budget=0.2, monotone=True, defier_budget=0.3 + 1e-6)
    assert ok.bounds is not None


def test_scaling_and_shifting_the_outcome_levels():
    counts = np.array([[[30, 10, 10], [5, 5, 40]], [[20, 5, 5], [10, 20, 40]]])
    base = run(from_counts(counts), budget=0.1)
    scaled = run(from_counts(counts, outcome_levels=[0, 2, 4]), budget=0.1, threshold=0.0)
    shifted = run(from_counts(counts, outcome_levels=[10, 11, 12]), budget=0.1)
    assert scaled.bounds.low == pytest.approx(2 * base.bounds.low, abs=LP_TOL)
    assert scaled.bounds.high == pytest.approx(2 * base.bounds.high, abs=LP_TOL)
    assert shifted.bounds.low == pytest.approx(base.bounds.low, abs=LP_TOL)
    assert shifted.bounds.high == pytest.approx(base.bounds.high, abs=LP_TOL)
    assert any("taken as numbers" in a for a in base.assumptions())
    assert -2 <= base.bounds.low <= base.bounds.high <= 2


def test_breakdown_budget():
    rng = np.random.default_rng(21)
    share, weights, _ = type_model(rng, 2, 2, 2, np.array([0.0, 1.0]))
    table = from_counts(counts_of(share, weights))
    at_zero = run(table, budget=0.0)
    inside = 0.5 * (at_zero.bounds.low + at_zero.bounds.high)
    assert run(table, threshold=inside).breakdown_budget == 0.0
    widest = run(table, budget=1.0).bounds  # no exclusion at all: Manski-type bounds
    assert widest.high > at_zero.bounds.high + 0.01
    above = 0.5 * (at_zero.bounds.high + widest.high)
    result = run(table, threshold=above, budget=0.5)
    eps = result.breakdown_budget
    assert eps > 0
    # the bounds reach the threshold exactly at the breakdown budget and not before
    assert run(table, budget=eps).bounds.high == pytest.approx(above, abs=1e-6)
    assert run(table, budget=max(0.0, eps - 1e-3)).bounds.high < above
    assert run(table, threshold=widest.high + 0.01).breakdown_budget is None  # never


def test_three_level_treatment_reports_each_contrast():
    rng = np.random.default_rng(4)
    share, weights, truth = type_model(rng, 2, 3, 2, np.array([0.0, 1.0]), 0.05)
    result = run(from_counts(counts_of(share, weights)), budget=0.05)
    assert [c.level for c in result.contrasts] == [1.0, 2.0]
    assert result.bounds == result.contrasts[-1].bounds
    assert result.bounds.low - 1e-5 <= truth <= result.bounds.high + 1e-5
    doc = result.to_dict()
    assert doc["contrast"] == {"level": 2, "base": 0} and len(doc["contrasts"]) == 2


def test_adaptive_curve_equals_solving_every_point():
    rng = np.random.default_rng(12)
    grid = np.linspace(0.0, 1.0, 41)
    solves = np.zeros(2, dtype=int)
    for shape in ((2, 2, 2), (3, 2, 3), (2, 3, 2)):
        K, J, L = shape
        programmes = Programmes(shape, np.arange(L, dtype=float))
        calls = []
        solve_one = programmes.interval
        programmes.interval = lambda *args: calls.append(args) or solve_one(*args)
        for defiers in (1.0, 0.0):
            programmes.set_data(rng.integers(0, 40, size=shape) + 1)
            start = programmes.min_budget(defiers)
            for c in range(1, J):
                calls.clear()
                adaptive = curve(programmes, c, grid, defiers, start)
                n_adaptive = len(calls)
                every = curve(programmes, c, grid, defiers, start, every_point=True)
                solves += (n_adaptive, len(calls) - n_adaptive)
                for a, b in zip(adaptive, every):
                    assert (a is None) == (b is None)
                    if a is not None:
                        assert a == pytest.approx(b, abs=1e-8)
    assert solves[0] < solves[1] / 2


# --------------------------------------------------------------------------- the reduction
def _compare_encodings(shape, n_tables, seed):
    K, J, L = shape
    rng = np.random.default_rng(seed)
    values = np.arange(L, dtype=float) * 1.5
    reduced = Programmes(shape, values)
    full = Programmes(shape, values, enumeration="full")
    for _ in range(n_tables):
        counts = rng.integers(0, 50, size=shape) + 1
        reduced.set_data(counts)
        full.set_data(counts)
        for defiers in (1.0, 0.0, 0.1):
            first, second = reduced.min_budget(defiers), full.min_budget(defiers)
            assert (first is None) == (second is None)
            if first is None:
                continue
            assert first == pytest.approx(second, abs=LP_TOL)
            for c in range(1, J):
                for budget in (first, min(1.0, first + 0.05), 1.0):
                    a = reduced.interval(c, budget, defiers)
                    b = full.interval(c, budget, defiers)
                    assert a == pytest.approx(b, abs=LP_TOL)
                for theta in (0.0, 0.4):
                    a, b = reduced.breakdown(c, theta, defiers), full.breakdown(c, theta, defiers)
                    assert (a is None) == (b is None)
                    if a is not None:
                        assert a == pytest.approx(b, abs=LP_TOL)
        assert reduced.min_defiers() == pytest.approx(full.min_defiers(), abs=LP_TOL)


@pytest.mark.parametrize("shape", [(2, 2, 2), (3, 2, 2), (2, 3, 2), (2, 2, 3)])
def test_reduced_programme_equals_full_enumeration(shape):
    _compare_encodings(shape, 3, seed=42)


def test_reduced_equals_full_enumeration_ternary_z_and_y():
    _compare_encodings((3, 2, 3), 1, seed=43)  # 5,832 response types in the full programme


@pytest.mark.slow
@pytest.mark.parametrize("shape", [(3, 2, 3), (2, 3, 3), (3, 3, 2)])
def test_reduced_equals_full_enumeration_many_tables(shape):
    _compare_encodings(shape, 6, seed=44)


def test_full_enumeration_refuses_a_million_types():
    with pytest.raises(InputError, match="full enumeration"):
        Programmes((4, 2, 4), np.arange(4.0), enumeration="full")


# --------------------------------------------------------------------------- data and inference
def _individuals(counts, names=("z", "x", "y")) -> pd.DataFrame:
    counts = np.asarray(counts)
    index = np.array(list(itertools.product(*map(range, counts.shape))))
    rows = np.repeat(index, counts.ravel(), axis=0)
    return pd.DataFrame(rows, columns=list(names))


def test_counts_input_equals_individual_input():
    counts = np.array([[[12, 30], [7, 9]], [[20, 11], [25, 40]], [[5, 6], [3, 9]]])
    frame = _individuals(counts)
    shuffled = frame.sample(frac=1.0, random_state=3).reset_index(drop=True)
    cells = frame.value_counts().rename("count").reset_index()
    table_rows = tabulate(from_frame(shuffled, Spec("y", ("x",), ("z",))))
    table_counts = counts_from_frame(cells, outcome="y", treatment="x", instrument="z")
    np.testing.assert_array_equal(table_rows.counts, counts)
    np.testing.assert_array_equal(table_counts.counts, counts)
    first = run(table_rows, reps=20, seed=9)
    second = run(table_counts, reps=20, seed=9)
    assert first.bounds == second.bounds and first.ci == second.ci


def test_counts_file_formats_agree(tmp_path):
    cells = pd.DataFrame({"arm": [1, 1, 1, 1, 2, 2, 2, 2], "took": [0, 0, 1, 1] * 2,
                          "ok": [0, 1] * 4, "count": [10, 20, 5, 5, 8, 8, 12, 30]})
    cells.to_csv(tmp_path / "c.csv", index=False)
    cells.to_parquet(tmp_path / "c.parquet")
    roles = {"outcome": "ok", "treatment": "took", "instrument": "arm"}
    first = read_counts(tmp_path / "c.csv", **roles)
    second = read_counts(tmp_path / "c.parquet", **roles)
    np.testing.assert_array_equal(first.counts, second.counts)
    assert first.instrument_levels == (1.0, 2.0) and first.n == 98
    with pytest.raises(InputError, match="does not exist"):
        read_counts(tmp_path / "missing.csv", **roles)


def test_bootstrap_is_deterministic_given_the_seed():
    table = tabulate(from_frame(pd.read_csv(NUDGE), Spec("bp_controlled", ("screened",),
                                                         ("sms",))))
    first = run(table, reps=30, seed=123)
    again = run(table, reps=30, seed=123)
    other = run(table, reps=30, seed=124)
    assert first.ci == again.ci and first.focus.se == again.focus.se
    assert first.ci != other.ci
    assert first.ci.low < first.bounds.low and first.ci.high > first.bounds.high
    assert first.bootstrap.used == 30 and first.bootstrap.seed == 123


def test_bootstrap_counts_replicates_that_do_not_fit():
    # On the boundary of the instrumental inequality about half the resamples violate it.
    counts = np.array([[[50, 0], [0, 50]], [[0, 50], [50, 0]]])
    result = run(from_counts(counts), budget=0.0, reps=40, seed=1)
    assert result.bounds is not None
    b = result.bootstrap
    assert b.infeasible > 0 and b.used + b.infeasible + b.skipped == 40
    assert any("do not fit" in note for note in result.notes)


def test_result_dictionary_and_text():
    counts = np.array([[[60, 30], [4, 6]], [[25, 15], [30, 30]]])
    result = run(from_counts(counts), budget=0.1, reps=20, seed=2, points=11)
    doc = json.loads(json.dumps(result.to_dict(), allow_nan=False))
    for key in ("bounds", "ci", "curve", "breakdown_budget", "min_budget",
                "inequality_holds", "assumptions", "caution"):
        assert key in doc
    assert len(doc["curve"]) == 11 and set(doc["curve"][0]) == {"budget", "lower", "upper"}
    assert doc["curve"][-1]["budget"] == pytest.approx(0.1)  # default end: the budget, >= 0.1
    text = str(result)
    assert "Caution" in text and "Assumptions" in text and "randomised" in text


@pytest.mark.parametrize("options, fragment", [
    ({"budget": 1.5}, "budget"),
    ({"budget": -0.1}, "budget"),
    ({"defier_budget": 0.1, "monotone": True, "budget": float("nan")}, "budget"),
    ({"defier_budget": 2.0, "monotone": True}, "defier budget"),
    ({"defier_budget": 0.1}, "--monotone"),
    ({"reps": 3}, "reps"),
    ({"points": 1}, "points"),
    ({"confidence_level": 1.0}, "--level"),
    ({"threshold": float("inf")}, "threshold"),
])
def test_bad_options(options, fragment):
    table = from_counts([[[10, 10], [10, 10]], [[5, 5], [5, 25]]])
    with pytest.raises(InputError, match=fragment):
        discrete_bounds(table, **{"reps": 0, **options})


def test_bad_tables():
    with pytest.raises(InputError, match="5 distinct values.*2 to 4"):
        tabulate(from_frame(pd.DataFrame({"y": [0, 1] * 5, "x": [0, 1] * 5,
                                          "z": [0, 1, 2, 3, 4] * 2}), Spec("y", ("x",), ("z",))))
    frame = pd.DataFrame({"z": [0, 0, 1, 1], "x": [0, 1, 0, 1], "y": [1, 1, 1, 1],
                          "count": [3, 4, 5, 6]})
    with pytest.raises(InputError, match="single value"):
        counts_from_frame(frame, outcome="y", treatment="x", instrument="z")
    frame["y"] = [0, 1, 0, 1]
    for bad, what in (([3, -4, 5, 6], "negative"), ([3, 4.5, 5, 6], "non-integer")):
        with pytest.raises(InputError, match=what):
            counts_from_frame(frame.assign(count=bad), outcome="y", treatment="x",
                              instrument="z")
    with pytest.raises(InputError, match="no observations"):
        counts_from_frame(frame.assign(count=[3, 4, 0, 0]), outcome="y", treatment="x",
                          instrument="z")
    with pytest.raises(InputError, match="did you mean"):
        counts_from_frame(frame, outcome="yy", treatment="x", instrument="z")
    with pytest.raises(InputError, match="at most 3 levels"):
        from_counts(np.ones((4, 3, 2)))


# --------------------------------------------------------------------------- command line
def invoke(*args):
    return runner.invoke(app, [str(a) for a in args])


def test_cli_nudge_json_contract():
    result = invoke("discrete", NUDGE, *NUDGE_ROLES, "--reps", "20", "--seed", "1",
                    "--points", "11", "--json")
    assert result.exit_code == 0, result.stderr
    doc = json.loads(result.stdout)
    assert len(doc["bounds"]) == 2 and doc["bounds"][0] <= doc["bounds"][1]
    assert len(doc["ci"]) == 2 and doc["ci"][0] <= doc["bounds"][0]
    assert len(doc["curve"]) == 11
    assert all(set(p) == {"budget", "lower", "upper"} for p in doc["curve"])
    assert doc["min_budget"] == 0.0 and doc["inequality_holds"] is True
    assert "breakdown_budget" in doc and doc["budget"] == 0.1
    assert doc["caution"] and doc["assumptions"]


def test_cli_json_stdout_is_clean_in_a_fresh_process(tmp_path):
    # HiGHS prints a banner on file descriptor 1 the first time a process uses it; only a fresh
    # process shows whether it is silenced.
    code = "from sensiv.cli import main; main()"
    completed = subprocess.run(
        [sys.executable, "-c", code, "discrete", str(NUDGE), *NUDGE_ROLES, "--reps", "0",
         "--points", "3", "--json"], capture_output=True, text=True, cwd=tmp_path, timeout=120)
    assert completed.returncode == 0, completed.stderr
    doc = json.loads(completed.stdout)  # exactly one document, nothing else
    assert doc["ci"] is None and "HiGHS" not in completed.stdout


def test_cli_counts_table_and_out_dir(tmp_path):
    frame = pd.read_csv(NUDGE)
    cells = frame.groupby(["sms", "screened", "bp_controlled"]).size().rename("count")
    path = tmp_path / "cells.csv"
    cells.reset_index().to_csv(path, index=False)
    out = tmp_path / "report"
    common = ("--budget", "0.05", "--reps", "20", "--seed", "4", "--points", "6", "--json")
    from_rows = invoke("discrete", NUDGE, *NUDGE_ROLES, *common)
    from_cells = invoke("discrete", path, *NUDGE_ROLES, "--counts", *common, "--out", out)
    assert from_rows.exit_code == 0 and from_cells.exit_code == 0, from_cells.stderr
    first, second = json.loads(from_rows.stdout), json.loads(from_cells.stdout)
    assert first["bounds"] == second["bounds"] and first["ci"] == second["ci"]
    assert {p.name for p in out.iterdir()} == {
        "discrete.json", "discrete.md", "discrete-table.md", "discrete-table.tex",
        "discrete-table.csv", "discrete-table.json", "discrete-curve.png",
        ".sensiv-bundle"}  # the marker of a bundle sensiv wrote whole
    assert json.loads((out / "discrete.json").read_text())["bounds"] == second["bounds"]
    markdown = (out / "discrete.md").read_text()
    assert "| budget |" in markdown and "Caution" in markdown


def test_cli_text_output_with_monotonicity():
    result = invoke("discrete", NUDGE, *NUDGE_ROLES, "--monotone", "--reps", "0",
                    "--points", "3", "--threshold", "0.1")
    assert result.exit_code == 0, result.stderr
    assert "monotonicity" in result.stdout and "Caution" in result.stdout


def bad(result, *fragments):
    assert result.exit_code == 2, (result.exit_code, result.stdout, result.stderr)
    assert "Traceback" not in result.stderr and result.stdout == ""
    for fragment in fragments:
        assert fragment.lower() in result.stderr.lower(), result.stderr


@pytest.fixture()
def cells(tmp_path) -> Path:
    path = tmp_path / "cells.csv"
    pd.DataFrame({"z": [0, 0, 0, 0, 1, 1, 1, 1], "x": [0, 0, 1, 1] * 2, "y": [0, 1] * 4,
                  "count": [10, 20, 5, 5, 8, 8, 12, 30]}).to_csv(path, index=False)
    return path


CELL_ROLES = ("--outcome", "y", "--treatment", "x", "--instrument", "z", "--counts")


def test_cli_bad_inputs(tmp_path, cells):
    frame = pd.read_csv(NUDGE)
    continuous = tmp_path / "continuous.csv"
    frame.assign(age_z=frame["age"]).to_csv(continuous, index=False)
    bad(invoke("discrete", continuous, "--outcome", "bp_controlled", "--treatment",
               "screened", "--instrument", "age"), "'age'", "distinct values", "2 to 4")
    table = pd.read_csv(cells)
    for column, values, fragments in (
            ("count", [10, -20, 5, 5, 8, 8, 12, 30], ("negative",)),
            ("count", [10, 2.5, 5, 5, 8, 8, 12, 30], ("non-integer",)),
            ("count", [0, 0, 0, 0, 8, 8, 12, 30], ("no observations", "level")),
    ):
        path = tmp_path / f"bad_{len(fragments[0])}.csv"
        table.assign(**{column: values}).to_csv(path, index=False)
        bad(invoke("discrete", path, *CELL_ROLES), *fragments)
    bad(invoke("discrete", cells, *CELL_ROLES, "--budget", "1.5"), "--budget", "1.5")
    bad(invoke("discrete", cells, *CELL_ROLES, "--monotone", "--defier-budget", "-0.1"),
        "--defier-budget")
    bad(invoke("discrete", cells, *CELL_ROLES, "--defier-budget", "0.1"), "--monotone")
    bad(invoke("discrete", cells, *CELL_ROLES, "--treatment", "y"), "exactly one")
    bad(invoke("discrete", cells, *CELL_ROLES, "--level", "1.2"), "--level")


def test_cli_infeasible_budget_is_a_finding_not_an_error(tmp_path):
    path = tmp_path / "violating.csv"
    pd.DataFrame({"z": [0, 0, 1, 1, 0], "x": [0, 0, 0, 0, 1], "y": [0, 1, 0, 1, 1],
                  "count": [100, 0, 70, 30, 0]}).to_csv(path, index=False)
    result = invoke("discrete", path, *CELL_ROLES, "--budget", "0.1", "--reps", "20",
                    "--json")
    assert result.exit_code == 0, result.stderr
    doc = json.loads(result.stdout)
    assert doc["bounds"] is None and doc["ci"] is None
    assert doc["inequality_holds"] is False
    assert doc["min_budget"] == pytest.approx(0.3, abs=LP_TOL)  # by hand, as above
    assert any("does not fit" in note for note in doc["notes"])
    assert doc["curve"][0]["lower"] is None and doc["curve"][-1]["lower"] is not None


def test_repeated_cell_of_a_counts_table_is_refused_naming_it():
    # common practice, no source: a cell listed twice is a copy mistake, not to be summed
    frame = pd.DataFrame({"z": [0, 0, 1, 1, 0], "x": [0, 1, 0, 1, 1], "y": [0, 1, 0, 1, 1],
                          "count": [3, 4, 5, 6, 2]})
    with pytest.raises(InputError, match=r"cell \(z = 0, x = 1, y = 1\) 2 times.*rows 2, 5"):
        counts_from_frame(frame, outcome="y", treatment="x", instrument="z")
    counts_from_frame(frame.iloc[:4], outcome="y", treatment="x", instrument="z")  # once: fine
