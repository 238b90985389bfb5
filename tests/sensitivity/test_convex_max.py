"""The maximum of ``s'γ + c√q(γ)`` over a box without enumerating every corner.

Outside facts used: a convex function attains its maximum over a polytope at a vertex
(Rockafellar 1970, Convex Analysis, Corollary 32.3.2; from memory), so enumerating all corners
is the reference for small ``k``; for large ``k`` the reference is a dense random sampling of
the box, which can only fall short of the maximum.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from sensiv.sensitivity.convex_max import (Objective, corners, fixed_coordinates,
                                           maximise, node_fix)


def random_problem(rng, k, strength=1.0):
    """A random semi-definite ``Q`` ((1+k)²) and slope ``s``; ``strength`` weighs the
    quadratic against the linear part (large: many non-monotone coordinates)."""
    root = rng.standard_normal((k + 1, k + 1)) * rng.uniform(0.1, 1.0, k + 1) * strength
    quad = root @ root.T
    s = rng.standard_normal(k) * rng.uniform(0.0, 1.5)
    lows = -rng.uniform(0.0, 1.0, k)
    highs = rng.uniform(0.0, 1.0, k)
    return Objective.of(s, 1.96, quad), lows, highs


def all_corners(lows, highs):
    return np.array(list(itertools.product(*zip(lows, highs))))


@pytest.mark.parametrize("seed", range(8))
def test_branch_and_bound_equals_corner_enumeration(seed):
    # reference: the maximum over all 2^k corners (a convex function peaks at a corner)
    rng = np.random.default_rng(seed)
    k = int(rng.integers(2, 11))
    obj, lows, highs = random_problem(rng, k, strength=float(rng.uniform(0.2, 1.5)))
    exact = float(np.max(obj.values(all_corners(lows, highs))))
    forced = maximise(obj, lows, highs, corner_limit=-1, gap=1e-13)
    assert forced.method == "branch_and_bound"
    assert forced.exact
    assert abs(forced.value - exact) <= 1e-10 * max(1.0, abs(exact))
    assert abs(forced.attained - exact) <= 1e-10 * max(1.0, abs(exact))
    assert abs(float(obj.values(forced.point)[0]) - forced.attained) <= 1e-12 * max(1.0, exact)
    enumerated = maximise(obj, lows, highs)
    assert enumerated.method == "corners" and enumerated.exact
    assert abs(enumerated.value - exact) <= 1e-12 * max(1.0, abs(exact))


@pytest.mark.parametrize("k", [20, 50])
def test_never_below_a_dense_sampling_of_the_box(k):
    # reference: 20,000 random corners and 20,000 random interior points of the box
    rng = np.random.default_rng(k)
    obj, lows, highs = random_problem(rng, k, strength=0.3)
    result = maximise(obj, lows, highs, max_nodes=300)
    draws = rng.uniform(lows, highs, (20_000, k))
    sampled = max(float(np.max(obj.values(draws))),
                  float(np.max(obj.values(np.where(draws > 0.5 * (lows + highs), highs,
                                                   lows)))))
    assert result.value >= sampled
    assert result.value >= result.attained
    assert result.exact == (result.gap <= 1e-9)
    # the reported corner is a corner and attains the lower value
    on_end = np.isclose(result.point, lows) | np.isclose(result.point, highs)
    assert on_end.all()


def test_monotone_coordinates_are_fixed_at_the_end_their_sign_picks():
    # |s_j| ≥ c√Q_jj makes f monotone in γ_j (Cauchy–Schwarz); check by moving γ_j at random
    # points of the box.  Common practice, no source.
    rng = np.random.default_rng(3)
    obj, lows, highs = random_problem(rng, 6, strength=0.3)
    base, free = fixed_coordinates(obj, lows, highs)
    fixed = np.flatnonzero(~free)
    assert fixed.size > 0
    points = rng.uniform(lows, highs, (500, 6))
    for j in fixed:
        moved = points.copy()
        moved[:, j] = base[j]
        assert np.all(obj.values(moved) >= obj.values(points) - 1e-12)


@pytest.mark.parametrize("seed", range(5))
def test_fixing_on_a_sub_box_keeps_its_maximum(seed):
    # reference: all corners of a random sub-box
    rng = np.random.default_rng(100 + seed)
    obj, lows, highs = random_problem(rng, 7, strength=float(rng.uniform(0.2, 1.2)))
    cut = rng.uniform(lows, highs)
    l, u = np.where(rng.random(7) < 0.5, lows, cut), np.where(rng.random(7) < 0.5, cut, highs)
    l, u = np.minimum(l, u), np.maximum(l, u)
    exact = float(np.max(obj.values(all_corners(l, u))))
    fl, fu = node_fix(obj, l, u)
    assert np.all(fl >= l) and np.all(fu <= u)
    assert abs(float(np.max(obj.values(all_corners(fl, fu)))) - exact) <= 1e-12 * max(1, exact)


def test_corners_come_in_chunks_that_cover_every_corner_once():
    lows, highs = np.array([0.0, 1.0, 2.0, 3.0]), np.array([1.0, 2.0, 3.0, 4.0])
    free = np.array([True, False, True, True])
    base = lows.copy()
    rows = np.vstack([corners(base, free, lows, highs, 0, 3), corners(base, free, lows, highs,
                                                                       3, 8)])
    assert len({tuple(r) for r in rows}) == 8
    assert np.all(rows[:, 1] == 1.0)

