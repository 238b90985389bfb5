"""The certified weak-IV-robust sensitivity set with several instruments.

Sources of the checks:

* the set's definition (Anderson–Rubin inversion under a direct effect, written in
  ``sensiv.sensitivity.robust_set``), evaluated here from the formula by independent numpy /
  scipy / cvxpy code (``q_direct``) — common practice, no source;
* with Γ = {0} the set is the plain Anderson–Rubin set, computed exactly by the polynomial
  roots of ``sensiv.estimation.linalg.quadratic_ratio_set`` (a different route: eigenvalues of a
  companion pencil, no bisection);
* the interval bounds of ``robust_certified`` (derived in its docstring) are checked against the
  minimised statistic at sampled points of each interval;
* agreement with the earlier grid method (``robust_set.grid_set``) on ordinary designs, from
  data with robust and cluster covariances (reference: the earlier method itself).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings, strategies as st
from scipy import stats
from scipy.optimize import lsq_linear

from sensiv.core.errors import WeakInstrumentWarning
from sensiv.data import Spec, from_frame
from sensiv.estimation import iv, linalg
from sensiv.sensitivity import bounds, robust_certified as rc
from sensiv.sensitivity.direct_sets import box_set, polytope_set
from sensiv.sensitivity.robust_minimiser import make_minimiser, make_support
from sensiv.sensitivity.robust_set import ReducedForm, grid_set, reduced_form, robust_set

CRIT2 = stats.chi2.ppf(0.95, 2)


def q_direct(rf: ReducedForm, dset, beta: float) -> float:
    """min over Γ of (ρ − βπ − γ)'V(β)⁻¹(ρ − βπ − γ), from the formula: V by its definition,
    its inverse square root by an eigendecomposition, the minimum by BVLS (box) or cvxpy
    (polytope) — none of the module's code."""
    v = rf.v_rr - beta * (rf.v_rp + rf.v_rp.T) + beta * beta * rf.v_pp
    vals, vecs = np.linalg.eigh(v)
    w = (vecs / np.sqrt(vals)).T
    target = w @ (rf.rho - beta * rf.pi)
    if dset.box is not None:
        lo = np.array([b.low for b in dset.box])
        hi = np.array([b.high for b in dset.box])
        free = lo < hi
        r0 = target - w[:, ~free] @ lo[~free]
        if free.any():
            res = lsq_linear(w[:, free], r0, bounds=(lo[free], hi[free]), method="bvls",
                             tol=1e-14)
            r0 = r0 - w[:, free] @ res.x
        return float(r0 @ r0)
    import cvxpy as cp

    g = cp.Variable(w.shape[0])
    prob = cp.Problem(cp.Minimize(cp.sum_squares(target - w @ g)),
                      [dset.constraints @ g <= dset.rhs])
    prob.solve(solver="CLARABEL")
    return float(prob.value)


def planted() -> ReducedForm:
    """Two instruments whose Anderson–Rubin set is a wide piece and a piece about 1/10,000 of
    the whole span wide (found by a random search over joint covariances, rounded to 4
    decimals; the piece survives the rounding — checked below from the formula)."""
    rho = np.array([0.969, 1.6333])
    pi = np.array([1.1431, -1.4321])
    j = np.array([[0.3081, 0.0718, -0.1295, 0.4589],
                  [0.0718, 0.3012, 0.207, 0.2348],
                  [-0.1295, 0.207, 0.3159, -0.0431],
                  [0.4589, 0.2348, -0.0431, 0.8125]])
    assert np.linalg.eigvalsh(j).min() > 0
    return ReducedForm(rho, pi, j[:2, :2], j[:2, 2:], j[2:, 2:], CRIT2)


def random_rf(rng, k: int, strength: float) -> ReducedForm:
    pi = rng.normal(size=k) * strength
    rho = rng.normal() * pi + rng.normal(size=k) * 0.1
    a = rng.normal(size=(2 * k, 2 * k)) * 0.1
    j = a @ a.T + 0.01 * np.eye(2 * k)
    return ReducedForm(rho, pi, j[:k, :k], j[:k, k:], j[k:, k:], stats.chi2.ppf(0.95, k))


def same_pieces(a, b, tol: float) -> bool:
    if len(a) != len(b):
        return False
    for p, q in zip(a, b):
        for e1, e2 in ((p.low, q.low), (p.high, q.high)):
            if math.isinf(e1) or math.isinf(e2):
                if e1 != e2:
                    return False
            elif abs(e1 - e2) > tol * max(1.0, abs(e2)):
                return False
    return True


# ------------------------------------------------------------------ a planted narrow piece
@pytest.mark.parametrize("shape", ["box", "polytope"])
def test_planted_narrow_piece_is_found_and_the_grid_misses_it(shape):
    rf = planted()
    exact = linalg.quadratic_ratio_set(rf.rho, rf.pi, rf.v_rr, rf.v_rp, rf.v_pp, rf.critical)
    assert len(exact) == 2
    narrow, wide = exact
    assert narrow.width < 1e-4 * (wide.high - narrow.low)
    # the piece is real: the statistic from the formula is below χ² at its middle
    middle = 0.5 * (narrow.low + narrow.high)
    zero = box_set(["z1", "z2"], [(0.0, 0.0), (0.0, 0.0)])
    assert q_direct(rf, zero, middle) < rf.critical
    if shape == "box":
        dset = zero
    else:  # a tiny diamond |γ₁| + |γ₂| ≤ 1e-9 around 0: the quadratic-programme route
        signs = np.array([[1, 1], [1, -1], [-1, 1], [-1, -1]], float)
        dset = polytope_set(["z1", "z2"], signs, np.full(4, 1e-9))
    found, method = robust_set(rf, dset)
    assert method.startswith("certified")
    assert same_pieces(found, exact, 1e-7)
    old = grid_set(rf, dset)
    assert len(old) == 1 and old[0].low > narrow.high  # the 101/401-point grid misses it


# ------------------------------------------------------------------ the bounds themselves
@pytest.mark.parametrize("projective", [False, True])
@pytest.mark.parametrize("seed", range(4))
def test_interval_bounds_enclose_the_statistic(projective, seed):
    # the lower bound min(h(a), h(b)) is ≤ Q on [a, b] and the upper bound ≥ Q there (module
    # docstring of robust_certified), in both charts, checked at 9 points of each interval
    rng = np.random.default_rng(seed)
    rf = random_rf(rng, 3, 1.0)
    dset = box_set(["a", "b", "c"], [(-0.1, 0.05), (0.0, 0.2), (-0.03, 0.03)])
    centre, radius = rng.normal(), rng.uniform(0.5, 3.0)
    middle, outer = rc.charts(rf.rho, rf.pi, rf.v_rr, rf.v_rp, rf.v_pp, centre, radius)
    chart = outer if projective else middle
    minimiser, support = make_minimiser(dset), make_support(dset)
    end = chart.outer_end if projective else radius
    checked = 0
    for _ in range(30):
        a, b = np.sort(rng.uniform(0.02 if projective else -end, end, 2))
        pa, pb = (rc.evaluate(chart, minimiser, 0.0, s) for s in (a, b))
        mid = rc.evaluate(chart, minimiser, 0.0, 0.5 * (a + b))
        low = rc.lower_bound(chart, support, a, b, mid)
        high = rc.upper_bound(chart, pa, pb)
        for s in np.linspace(a, b, 9):
            q = q_direct(rf, dset, chart.to_beta(s, s).low)
            assert low <= q * (1 + 1e-9) + 1e-12
            assert q <= high * (1 + 1e-9) + 1e-12
        checked += math.isfinite(high)
    assert checked > 5  # the tangent is positive definite on many intervals


# ------------------------------------------------------------------ ordinary designs
@pytest.mark.parametrize("k", [2, 3])
@pytest.mark.parametrize("shape", ["box", "polytope"])
def test_equals_the_grid_on_random_designs(k, shape):
    rng = np.random.default_rng(10 + k)
    for strength in (0.3, 1.0, 3.0):
        rf = random_rf(rng, k, strength)
        widths = rng.uniform(0.01, 0.2, k)
        names = [f"z{j}" for j in range(k)]
        if shape == "box":
            dset = box_set(names, [(-w, 0.5 * w) for w in widths])
        else:  # a cross-polytope Σ|γ_j|/w_j ≤ 1
            signs = np.array(np.meshgrid(*[[1.0, -1.0]] * k)).reshape(k, -1).T
            dset = polytope_set(names, signs / widths, np.ones(len(signs)))
        found, method = robust_set(rf, dset)
        assert method.startswith("certified")
        assert same_pieces(found, grid_set(rf, dset), 1e-8), (strength, found)


def frame_of(seed: int, k: int = 3, n: int = 600) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    z = rng.normal(size=(n, k))
    v = rng.normal(size=n)
    x = z @ np.full(k, 0.25) + v
    u = 0.6 * v + rng.normal(size=n) * (1 + 0.5 * np.abs(z[:, 0]))
    out = pd.DataFrame({"y": 0.5 * x + u, "x": x, "g": rng.integers(0, 30, n)})
    for j in range(k):
        out[f"z{j + 1}"] = z[:, j]
    return out


@pytest.mark.parametrize("se", ["robust", "cluster"])
def test_equals_the_grid_from_data(se):
    frame = frame_of(2)
    spec = Spec("y", ("x",), ("z1", "z2", "z3"), cluster="g" if se == "cluster" else None)
    ranges = ["-0.05:0.05", "-0.02:0.04", "0:0.03"]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        res = bounds.sweep(from_frame(frame, spec), direct=ranges, se=se, points=3)
        result, pieces, sums = iv.fit_with_pieces(from_frame(frame, spec), se=se,
                                                  confidence_level=0.95, small=False)
    rf = reduced_form(pieces, sums, result)
    dset = box_set(spec.instruments, [(-0.05, 0.05), (-0.02, 0.04), (0.0, 0.03)])
    assert res.ar_method.startswith("certified")
    assert res.to_dict()["ar_method"] == res.ar_method
    assert same_pieces(res.ar_set, grid_set(rf, dset), 1e-8)


def test_unbounded_tails_follow_the_first_stage_wald_statistic():
    # the minimised statistic tends to π'V_ππ⁻¹π as |β| → ∞ (Γ bounded): with that below χ²
    # both tails are in the set (ends ±inf), above it neither is (common practice, no source)
    rng = np.random.default_rng(7)
    dset = box_set(["z1", "z2"], [(-0.02, 0.02), (-0.02, 0.02)])
    for strength, unbounded in ((0.05, True), (3.0, False)):
        rf = random_rf(rng, 2, strength)
        assert (linalg.wald_statistic(rf.pi, rf.v_pp) <= rf.critical) == unbounded
        found, _ = robust_set(rf, dset)
        assert (found[0].low == -math.inf and found[-1].high == math.inf) == unbounded
        for beta in (-1e6, 1e6):
            assert (q_direct(rf, dset, beta) <= rf.critical) == unbounded


# ------------------------------------------------------------------ property
@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10_000), k=st.sampled_from([2, 3]),
       strength=st.sampled_from([0.1, 0.5, 2.0]), polytope=st.booleans())
def test_sampled_points_are_classified_right(seed, k, strength, polytope):
    # every sampled β inside the reported set has g ≤ 0 (+ tol), every one outside g > 0 (− tol)
    rng = np.random.default_rng(seed)
    rf = random_rf(rng, k, strength)
    widths = rng.uniform(0.0, 0.3, k)
    names = [f"z{j}" for j in range(k)]
    if polytope:
        signs = np.array(np.meshgrid(*[[1.0, -1.0]] * k)).reshape(k, -1).T
        dset = polytope_set(names, signs / np.maximum(widths, 1e-3), np.ones(len(signs)))
    else:
        dset = box_set(names, [(-w, w * rng.uniform()) for w in widths])
    found, _ = robust_set(rf, dset)
    ends = [e for p in found for e in (p.low, p.high) if math.isfinite(e)]
    span = max([abs(e) for e in ends] + [1.0])
    samples = list(rng.uniform(-3 * span, 3 * span, 12))
    samples += [e + d for e in ends for d in (-1e-6 * span, 1e-6 * span)]
    tol = 1e-6 * rf.critical
    for beta in samples:
        inside = any(p.low <= beta <= p.high for p in found)
        g = q_direct(rf, dset, beta) - rf.critical
        assert (g <= tol) if inside else (g > -tol), (beta, g, found)
