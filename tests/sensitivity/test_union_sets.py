"""Union ends, identified set, breakdown scale and largest standard error over a direct-effect
set, checked against enumerating every vertex (small ``k``; a convex function peaks at a
vertex, a linear one at two: Rockafellar 1970, Convex Analysis, Corollary 32.3.2, from
memory) and against dense random sampling (``k`` = 20, 50: sampling can only fall short).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import pytest

from sensiv.core.errors import WeakInstrumentWarning
from sensiv.data import Spec, from_frame
from sensiv.sensitivity import bounds
from sensiv.sensitivity.bias_aware import largest_se
from sensiv.sensitivity.direct_sets import box_set, polytope_set
from sensiv.sensitivity.linear_core import Core
from sensiv.sensitivity.union import (breakdown_scale, identified_curve, identified_set_lp,
                                      union_curve)
from sensiv.sensitivity.union_sets import (breakdown_scale_set, candidate_vertices,
                                           identified_curve_set, largest_se_set, union_at,
                                           union_curve_set)


def random_core(rng, k, strength=1.0):
    root = rng.standard_normal((k + 1, k + 1)) * rng.uniform(0.05, 0.6, k + 1) * strength
    return Core("x", tuple(f"z{j + 1}" for j in range(k)), float(rng.normal()),
                rng.standard_normal(k) * rng.uniform(0.0, 1.0), root @ root.T, 1.96)


def random_box(rng, core):
    k = len(core.instruments)
    return box_set(core.instruments, [(-float(a), float(b)) for a, b in
                                      zip(rng.uniform(0, 0.8, k), rng.uniform(0, 0.8, k))])


@pytest.mark.parametrize("seed", range(6))
def test_forced_branch_and_bound_union_equals_all_vertices(seed):
    # reference: the union over all 2^k vertices (union_curve on box_set's corners)
    rng = np.random.default_rng(seed)
    core = random_core(rng, int(rng.integers(2, 10)), strength=float(rng.uniform(0.3, 2.0)))
    dset = random_box(rng, core)
    scales = np.array([0.0, 0.4, 1.0])
    ref_lo, ref_hi = union_curve(core, dset.vertices, scales)
    lo, hi, method = union_curve_set(core, dset, scales, corner_limit=-1, gap=1e-13)
    assert method.lower == method.upper == "branch_and_bound" and method.exact
    np.testing.assert_allclose(lo, ref_lo, rtol=0, atol=1e-10 * max(1.0, abs(ref_lo).max()))
    np.testing.assert_allclose(hi, ref_hi, rtol=0, atol=1e-10 * max(1.0, abs(ref_hi).max()))
    lo2, hi2, method2 = union_curve_set(core, dset, scales)
    assert method2.lower == "corners"
    np.testing.assert_allclose(lo2, ref_lo, rtol=0, atol=1e-12 * max(1.0, abs(ref_lo).max()))
    np.testing.assert_allclose(hi2, ref_hi, rtol=0, atol=1e-12 * max(1.0, abs(ref_hi).max()))


@pytest.mark.parametrize("k", [20, 50])
def test_union_never_narrower_than_sampled_corners(k):
    rng = np.random.default_rng(7 + k)
    core = random_core(rng, k, strength=0.3)
    dset = random_box(rng, core)
    assert dset.vertices is None                       # no 2^k corners stored
    interval, low_end, high_end = union_at(core, dset, 1.0, max_nodes=200)
    lows = np.array([b.low for b in dset.box])
    highs = np.array([b.high for b in dset.box])
    draws = rng.uniform(lows, highs, (20_000, k))
    sample = np.vstack([draws, np.where(draws > 0.5 * (lows + highs), highs, lows)])
    lo, hi = union_curve(core, sample, np.array([1.0]))
    assert interval.low <= lo[0] and interval.high >= hi[0]
    assert low_end.value >= low_end.attained and high_end.value >= high_end.attained


def test_identified_set_closed_form_and_polytope_lp():
    # reference: vertices of the box; for a polytope, the linear programme (HiGHS via cvxpy)
    rng = np.random.default_rng(11)
    core = random_core(rng, 4)
    dset = random_box(rng, core)
    scales = np.linspace(0, 2, 5)
    np.testing.assert_allclose(np.vstack(identified_curve_set(core, dset, scales)),
                               np.vstack(identified_curve(core, dset.vertices, scales)),
                               rtol=0, atol=1e-12)
    a = rng.standard_normal((9, 3))
    poly = polytope_set(("z1", "z2", "z3"), a, np.abs(rng.standard_normal(9)) + 0.1)
    core3 = random_core(rng, 3)
    lo, hi = identified_curve_set(core3, poly, np.array([1.0]))
    lp = identified_set_lp(core3, poly)
    assert abs(lo[0] - lp.low) <= 1e-7 and abs(hi[0] - lp.high) <= 1e-7
    assert candidate_vertices(core3, poly) is poly.vertices


@pytest.mark.parametrize("seed", range(4))
def test_bisected_breakdown_equals_exact_roots(seed):
    # reference: the exact quadratic roots over every vertex (union.breakdown_scale)
    rng = np.random.default_rng(40 + seed)
    core = random_core(rng, 5, strength=0.5)
    dset = random_box(rng, core)
    base = core.interval(np.zeros(5))
    for threshold in (base.low - 0.3, base.high + 0.7):
        exact = breakdown_scale(core, dset.vertices, threshold)
        bisected = breakdown_scale_set(core, dset, threshold, corner_limit=-1, gap=1e-13)
        if exact is None:
            assert bisected is None or bisected > 999.0
        else:
            assert bisected <= exact * (1 + 1e-11) + 1e-12
            assert abs(bisected - exact) <= 1e-9 * max(1.0, exact)


@pytest.mark.parametrize("seed", range(4))
def test_largest_se_equals_the_vertex_maximum(seed):
    rng = np.random.default_rng(60 + seed)
    core = random_core(rng, 6, strength=float(rng.uniform(0.3, 1.5)))
    dset = random_box(rng, core)
    for t in (0.5, 1.0):
        exact = largest_se([core], t * dset.vertices)
        assert abs(largest_se_set([core], dset, t) - exact) <= 1e-12 * exact
        forced = largest_se_set([core], dset, t, corner_limit=-1, gap=1e-13)
        assert abs(forced - exact) <= 1e-10 * exact


def many_instruments(n=2000, k=14, seed=5):
    rng = np.random.default_rng(seed)
    z = rng.standard_normal((n, k))
    v = rng.standard_normal(n)
    x = z @ np.full(k, 0.4) + v
    y = 0.5 * x + 0.6 * v + rng.standard_normal(n) * (1 + 0.5 * np.abs(z[:, 0]))
    frame = pd.DataFrame({"y": y, "x": x, **{f"z{j + 1}": z[:, j] for j in range(k)}})
    spec = Spec(outcome="y", treatments=("x",), instruments=tuple(f"z{j + 1}" for j in range(k)))
    return frame, spec


def test_sweep_with_fourteen_instruments_reports_its_method():
    # the whole sweep runs without storing 2^14 corners; its union is never narrower than sampled
    # corners of the box, and the JSON says how each end was found
    frame, spec = many_instruments()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        res = bounds.sweep(from_frame(frame, spec), direct=["-0.02:0.02"] * 14, points=5)
    doc = res.to_dict()["union_method"]
    assert doc["lower"] in ("corners", "branch_and_bound") and doc["gap"] == 1e-9
    assert isinstance(doc["exact"], bool)
    rng = np.random.default_rng(1)
    sample = rng.choice([-0.02, 0.02], size=(5000, 14))
    fit_core = _core_of(frame, spec)
    lo, hi = union_curve(fit_core, sample, np.array([1.0]))
    assert res.union_ci.low <= lo[0] + 1e-12 and res.union_ci.high >= hi[0] - 1e-12
    ident = res.identified_set
    assert math.isclose(ident.width, 2 * 0.02 * float(np.abs(fit_core.slope).sum()),
                        rel_tol=1e-10)
    assert len(res.curve.lower) == 5 and res.union_method.curve_exact == doc["curve_exact"]


def _core_of(frame, spec):
    from sensiv.estimation import iv
    from sensiv.sensitivity.linear_core import build_core, focus_block

    result, pieces, sums = iv.fit_with_pieces(
        from_frame(frame, spec), se="robust", confidence_level=0.95, small=False,
        extra_blocks=lambda p: [focus_block(p, 0)])
    return build_core(pieces, sums, result, 0)
