"""Bias-aware intervals centred at 2SLS (Armstrong & Kolesár 2021), checked from outside.

Sources beside each check:
* reference library: scipy.stats ``norm`` and ``foldnorm`` (the folded normal's quantile is
  ``cv_α(t)`` by definition);
* folded-normal algebra, common practice: ``cv_α(0) = z_{1−α/2}``, ``cv_α(t) − t → z_{1−α}``;
* reference library: linearmodels ``IV2SLS`` refitted on ``y − Zγ_c`` (estimate and se at the
  centre);
* geometry, common practice: the incentre of a right triangle;
* common practice, no source: invariants (zero set gives the 2SLS interval, widening with the
  scaling, not longer than the union with constant se) and Monte Carlo coverage.
"""

from __future__ import annotations

import itertools
import math
import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from sensiv.core.errors import InputError
from sensiv.data import from_frame
from sensiv.sensitivity import bounds
from sensiv.sensitivity import bias_aware as ba
from sensiv.sensitivity.direct_sets import box_set, polytope_set
from sensiv.sensitivity.linear_core import Core
from sensiv.sensitivity.published import published_analysis
from sensiv.sensitivity.published_covariance import core_from
from sensiv.sensitivity.union import union_interval

from test_bounds import core_of, design, refit, run_sweep, spec_for


# ------------------------------------------------------------------ the critical value
@pytest.mark.parametrize("level", [0.9, 0.95, 0.99])
def test_critical_value_at_zero_is_the_two_sided_normal_quantile(level):
    # folded-normal algebra: |N(0,1)| has 1-α quantile z_{1-α/2}; reference library: scipy
    from scipy.stats import norm

    assert ba.critical_value(0.0, level) == pytest.approx(norm.ppf(0.5 + level / 2), abs=1e-12)


@pytest.mark.parametrize("t", [0.01, 0.3, 1.0, 2.5, 6.0])
def test_critical_value_is_the_folded_normal_quantile(t):
    # reference library: scipy.stats.foldnorm.ppf(1-α, t) and norm.cdf for the coverage
    from scipy.stats import foldnorm, norm

    c = ba.critical_value(t, 0.95)
    assert c == pytest.approx(foldnorm.ppf(0.95, t), abs=1e-9)
    assert norm.cdf(c - t) - norm.cdf(-c - t) == pytest.approx(0.95, abs=1e-12)
    assert ba.critical_value(-t, 0.95) == c          # |N(-t,1)| has the law of |N(t,1)|


@pytest.mark.parametrize("level", [0.9, 0.95])
def test_critical_value_minus_t_tends_to_the_one_sided_quantile(level):
    # folded-normal algebra, common practice: P(|Z+t| ≤ c) = Φ(c−t) − Φ(−c−t) and the second
    # term vanishes as t grows, so cv_α(t) − t → z_{1−α}; at t = 8 it is below 1e-15
    from scipy.stats import norm

    z_one = norm.ppf(level)
    gaps = [ba.critical_value(t, level) - t for t in (0.5, 1.0, 2.0, 8.0, 50.0)]
    assert all(a > b for a, b in zip(gaps[:3], gaps[1:4]))      # falls towards the limit
    assert gaps[-2] == pytest.approx(z_one, abs=1e-10)
    assert gaps[-1] == pytest.approx(z_one, abs=1e-10)


def test_critical_value_is_convex_with_slope_at_most_one():
    # common practice, no source: the breakdown-scale argument of bias_aware_scale rests on
    # cv_α convex with 0 ≤ cv_α' ≤ 1 (checked on a fine grid; second differences ≥ −1e-12)
    ts = np.linspace(0.0, 10.0, 1001)
    cv = np.array([ba.critical_value(t) for t in ts])
    slopes = np.diff(cv) / np.diff(ts)
    assert np.all(np.diff(cv, 2) >= -1e-12)
    assert np.all(slopes >= 0.0) and np.all(slopes <= 1.0 + 1e-9)


def test_critical_value_rejects_a_bad_level():
    with pytest.raises(InputError, match="outside"):
        ba.critical_value(1.0, 1.5)


# ------------------------------------------------------------------ never longer than the union
def _constant_se_core(slope, se):
    k = len(slope)
    quad = np.zeros((k + 1, k + 1))
    quad[0, 0] = se * se
    return Core("x", tuple(f"z{i + 1}" for i in range(k)), 0.3, np.asarray(slope, float), quad,
                1.959963984540054)


@settings(max_examples=200, deadline=None)
@given(st.integers(1, 3).flatmap(lambda k: st.tuples(
    st.lists(st.floats(-5, 5), min_size=k, max_size=k),
    st.lists(st.tuples(st.floats(-2, 2), st.floats(0, 2)), min_size=k, max_size=k),
    st.floats(0.01, 3.0))))
def test_never_longer_than_the_union_with_constant_se(case):
    # common practice, no source (proof in the module docstring: cv_α(t) ≤ t + z_{1−α/2},
    # and the union over a box is b ± (B + z s) when s is constant)
    slope, boxes, se = case
    dset = box_set([f"z{i + 1}" for i in range(len(slope))],
                   [(lo, lo + w) for lo, w in boxes])
    core = _constant_se_core(slope, se)
    interval = ba.bias_aware([core], dset, 0.95).ci
    union = union_interval(core, dset.vertices)
    assert interval.width <= union.width * (1 + 1e-12) + 1e-12
    assert union.low - 1e-9 <= interval.low and interval.high <= union.high + 1e-9


# ------------------------------------------------------------------ on data
def test_zero_set_gives_the_ordinary_interval():
    # common practice, no source: with Γ = {0} there is no bias and cv_α(0) = z_{1−α/2}
    frame = design()
    res = run_sweep(frame, 1, ["0:0"])
    ci = res.fit.conf_int("x")
    b = res.bias_aware
    assert (b.max_bias, b.centre) == (0.0, "box centre")
    assert b.ci.low == pytest.approx(ci.low, rel=1e-12)
    assert b.ci.high == pytest.approx(ci.high, rel=1e-12)
    # and the curve at t = 0 of any set is the ordinary interval too
    wide = run_sweep(frame, 1, ["0.01:0.2"])
    assert wide.curve.ba_lower[0] == pytest.approx(ci.low, rel=1e-12)
    assert wide.curve.ba_upper[0] == pytest.approx(ci.high, rel=1e-12)


@pytest.mark.parametrize("se", ["classic", "robust", "cluster"])
def test_estimate_and_se_are_the_refit_at_the_centre(se):
    # reference library: linearmodels IV2SLS of y − Zγ at the box centre γ_c (estimate and
    # se_centre) and at the four corners (se: the largest of their se; 1e-8)
    frame = design(k_z=2)
    cluster = "g" if se == "cluster" else None
    res = run_sweep(frame, 2, ["-0.1:0.05", "0:0.08"], se=se, cluster=cluster)
    b = res.bias_aware
    centre = [-0.025, 0.04]
    beta, s_centre = refit(frame, centre, se, cluster)
    s = max(refit(frame, g, se, cluster)[1] for g in itertools.product((-0.1, 0.05), (0, 0.08)))
    assert b.centre_point == pytest.approx(tuple(centre))
    assert b.estimate == pytest.approx(beta, rel=1e-8)
    assert b.se_centre == pytest.approx(s_centre, rel=1e-8)
    assert b.se == pytest.approx(s, rel=1e-8)
    core = core_of(frame, 2, se, cluster)
    assert b.max_bias == pytest.approx(np.abs(core.slope) @ np.array([0.075, 0.04]), rel=1e-12)
    half = ba.critical_value(b.max_bias / b.se) * b.se
    assert (b.ci.low, b.ci.high) == pytest.approx((beta - half, beta + half), rel=1e-8)


def test_json_block_and_curve_keys():
    res = run_sweep(design(), 1, ["-0.1:0.1"])
    doc = res.to_dict()
    assert set(doc["bias_aware"]) >= {"ci", "estimate", "max_bias", "se", "critical_value",
                                      "weighting", "centre"}
    assert doc["bias_aware"]["weighting"] == "2sls"
    assert {"ba_lower", "ba_upper"} <= set(doc["curve"][0])
    assert doc["curve"][-1]["ba_lower"] == res.bias_aware.ci.low
    assert "bias_aware_scale" in doc["breakdown"]


def test_widens_monotonically_with_the_scaling():
    # common practice, no source: for a set centred at zero, b and s stay fixed and the
    # half-width s·cv_α(tB/s) grows with t; the intervals are nested
    res = run_sweep(design(k_z=2), 2, ["-0.1:0.1", "-0.05:0.05"], points=41)
    c = res.curve
    assert np.all(np.diff(c.ba_upper - c.ba_lower) > 0)
    assert np.all(np.diff(c.ba_lower) <= 1e-15) and np.all(np.diff(c.ba_upper) >= -1e-15)
    # shorter than the union at every t > 0 (the se varies with γ here, yet the gain holds)
    assert np.all((c.ba_upper - c.ba_lower)[1:] < (c.upper - c.lower)[1:])


@pytest.mark.parametrize("ranges", [["-0.2:0.2"], ["0.05:0.3"], ["-0.05:0.1"]])
def test_breakdown_scale_touches_the_threshold(ranges):
    # common practice, no source: at t* the near end of the interval over t*Γ is the threshold,
    # and just below t* the interval is clear of it (centred and off-centre sets)
    frame = design(strength=1.0)
    threshold = 0.0
    res = run_sweep(frame, 1, ranges, threshold=threshold)
    t = res.breakdown.bias_aware_scale
    assert t is not None and t > 0
    core = core_of(frame, 1, "robust")
    lo, hi = (float(v) for v in ranges[0].split(":"))
    dset = box_set(["z1"], [(lo, hi)])
    at = ba.bias_aware([core], dset, 0.95, scale=t).ci
    near = at.low if res.estimate > threshold else at.high
    assert near == pytest.approx(threshold, abs=1e-9 * res.se)
    assert not ba.bias_aware([core], dset, 0.95, scale=t * (1 - 1e-6)).ci.contains(threshold)


def test_breakdown_scale_zero_and_never():
    frame = design(strength=1.0)
    assert run_sweep(frame, 1, ["-0.1:0.1"], threshold=0.5).breakdown.bias_aware_scale == 0.0
    never = run_sweep(frame, 1, ["0:0"], threshold=0.0)
    assert never.breakdown.bias_aware_scale is None
    assert never.to_dict()["breakdown"]["bias_aware_scale"] is None


def test_chebyshev_centre_of_a_triangle(tmp_path):
    # geometry, common practice: the incentre of the triangle (0,0), (1,0), (0,1) is (r, r)
    # with r = 1/(2 + √2)
    dset = polytope_set(["z1", "z2"], np.array([[-1.0, 0.0], [0.0, -1.0], [1.0, 1.0]]),
                        np.array([0.0, 0.0, 1.0]))
    r = 1.0 / (2.0 + math.sqrt(2.0))
    assert ba.chebyshev_centre(dset) == pytest.approx([r, r], abs=1e-7)
    # on data: the sweep over a scaled triangle names the centre and takes B from the vertices
    path = tmp_path / "tri.csv"
    path.write_text("z1,z2,bound\n-1,0,0\n0,-1,0\n1,1,0.1\n")
    frame = design(k_z=2)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = bounds.sweep(from_frame(frame, spec_for(2)), polytope=str(path))
    b = res.bias_aware
    assert b.centre == "Chebyshev centre"
    assert b.centre_point == pytest.approx((0.1 * r, 0.1 * r), abs=1e-8)
    core = core_of(frame, 2, "robust")
    corners = np.array([[0, 0], [0.1, 0], [0, 0.1]]) - 0.1 * r
    assert b.max_bias == pytest.approx(np.max(np.abs(corners @ core.slope)), rel=1e-6)


# ------------------------------------------------------------------ published numbers
def test_published_zero_range_is_the_printed_interval():
    # common practice, no source: at Γ = {0} the interval is the printed B ± z·S
    res = published_analysis(estimate=0.75, se=0.25, first_stage=4.2, first_stage_se=0.6,
                             direct="0:0")
    z = ba.critical_value(0.0)
    assert res.bias_aware.ci.to_list() == pytest.approx([0.75 - z * 0.25, 0.75 + z * 0.25],
                                                        rel=1e-12)
    doc = res.to_dict()
    assert doc["bias_aware"]["centre"] == "box centre"
    assert {"ba_lower", "ba_upper"} <= set(doc["curve"][0])
    assert doc["breakdown"]["bias_aware_scale"] is None
    assert "Bias-aware 95% interval" in str(res) and "Bias-aware breakdown" in str(res)


@pytest.mark.parametrize("extra", [{}, {"reduced_form": 3.15, "reduced_form_se": 0.9}])
def test_published_interval_is_inside_the_union(extra):
    # common practice, no source: for a range symmetric about zero the centre is γ = 0, so
    # the bias-aware interval b ± cv·s with cv ≤ B/s + z lies inside b ± (B + z s) ⊆ union
    res = published_analysis(estimate=0.75, se=0.25, first_stage=4.2, first_stage_se=0.6,
                             direct="-1:1", **extra)
    b, u = res.bias_aware.ci, res.union_ci
    assert u.low <= b.low and b.high <= u.high and b.width < u.width
    assert res.bias_aware.max_bias == pytest.approx(1 / 4.2, rel=1e-12)


# ------------------------------------------------------------------ coverage (simulation)
ENDOGENEITY = 0.1   # corr(u, v): with it the 2SLS se is nearly the same at both corners


def _draw(rng, n, gamma):
    z, w, v = rng.normal(size=n), rng.normal(size=n), rng.normal(size=n)
    x = z + 0.5 * w + v
    u = ENDOGENEITY * v + math.sqrt(1 - ENDOGENEITY**2) * rng.normal(size=n)
    y = 1.0 + 0.5 * x + 0.3 * w + gamma * z + u
    return pd.DataFrame({"y": y, "x": x, "w": w, "z1": z})


def _robust_core(frame):
    """The robust core by the route of printed numbers: reduced form and first stage by OLS
    with their HC0 covariance (numpy), then ``core_from`` — equal to the data route's core in a
    just-identified model (tests/sensitivity/test_published.py; checked once below) and ~100x
    faster than a fit per replication."""
    c = np.column_stack([np.ones(len(frame)), frame["w"]])

    def partial(col):
        v = frame[col].to_numpy()
        return v - c @ np.linalg.lstsq(c, v, rcond=None)[0]

    zt, yt, xt = partial("z1"), partial("y"), partial("x")
    szz = zt @ zt
    rho, pi = zt @ yt / szz, zt @ xt / szz
    scores = np.column_stack([yt - rho * zt, xt - pi * zt]) * zt[:, None]
    return core_from(rho / pi, pi, scores.T @ scores / szz**2, ba.critical_value(0.0))


def test_the_fast_core_is_the_data_routes_core():
    # reference: the data route (itself checked against linearmodels in test_bounds.py)
    frame = _draw(np.random.default_rng(0), 250, 0.1)
    dset = box_set(["z1"], [(-0.1, 0.1)])
    fast = ba.bias_aware([_robust_core(frame)], dset, 0.95)
    slow = ba.bias_aware([core_of(frame, 1, "robust")], dset, 0.95)
    assert fast.ci.to_list() == pytest.approx(slow.ci.to_list(), rel=1e-9)
    assert fast.se == pytest.approx(slow.se, rel=1e-9)


def _coverage(reps, n, seed):
    """Robust errors, true direct effect at the upper corner of Γ = [−0.1, 0.1] (the corner at
    which the finite-sample skew of 2SLS works against coverage in this design)."""
    rng = np.random.default_rng(seed)
    dset = box_set(["z1"], [(-0.1, 0.1)])
    hits, ratios = 0, []
    for _ in range(reps):
        core = _robust_core(_draw(rng, n, 0.1))
        interval = ba.bias_aware([core], dset, 0.95).ci
        hits += interval.contains(0.5)
        ratios.append(interval.width / union_interval(core, dset.vertices).width)
    return hits / reps, float(np.mean(ratios))


def _check_coverage(reps, seed):
    # common practice, no source: at the corner the bias is the worst case, so the interval
    # should cover at about the nominal rate (2 binomial SEs); its mean length relative to
    # the union of intervals is reported and at most 1
    cover, ratio = _coverage(reps, 250, seed)
    print(f"bias-aware coverage {cover:.4f} over {reps} reps; mean length / union {ratio:.4f}")
    assert abs(cover - 0.95) <= 2 * math.sqrt(0.95 * 0.05 / reps)
    assert ratio <= 1.0


def test_coverage_at_a_corner_fast():
    _check_coverage(400, seed=21)


@pytest.mark.slow
def test_coverage_at_a_corner_4000_replications():
    _check_coverage(4000, seed=22)
