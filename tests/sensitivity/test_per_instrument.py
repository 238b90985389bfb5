"""Direct effects bounded per instrument in a table of associations, checked from outside.

Sources beside each check:
* refit, common practice, no source: the IVW estimate recomputed by
  :func:`sensiv.sensitivity.associations.ivw` on ``b_y − α`` (weights held fixed) is the
  linear correction ``β̂ − w̃'α``;
* reference library: cvxpy (CLARABEL / HiGHS) minimising and maximising the bias ``w̃'α``
  over a box and a polytope, against the closed form and sensiv's scipy linear programmes;
* reference library: scipy.stats ``foldnorm`` for the critical value at the breakdown;
* common practice, no source: invariants (zero allowance gives the IVW interval, widening with
  the scale, bias-aware never longer than the union with constant se, mirror symmetry, scaling
  the outcome scales every bound).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from sensiv.core.errors import InputError
from sensiv.sensitivity.associations import check_associations, ivw
from sensiv.sensitivity import per_instrument as pi
from sensiv.sensitivity import per_instrument_sets as ps


def table(seed=0, count=15, beta=0.3, spread=0.0, sign_mix=False):
    """A random table of associations (invented for the checks)."""
    rng = np.random.default_rng(seed)
    bx = rng.uniform(0.05, 0.25, count)
    if sign_mix:
        bx *= rng.choice([-1.0, 1.0], count)
    sx = rng.uniform(0.004, 0.012, count)
    sy = rng.uniform(0.01, 0.03, count)
    by = beta * bx + rng.normal(0.0, sy) + rng.normal(0.0, spread, count)
    return check_associations(first_stage=bx, first_stage_se=sx, reduced_form=by,
                              reduced_form_se=sy, names=[f"v{j}" for j in range(count)])


def shifted(assoc, alpha):
    return check_associations(first_stage=assoc.first_stage, first_stage_se=assoc.first_stage_se,
                              reduced_form=assoc.reduced_form - alpha,
                              reduced_form_se=assoc.reduced_form_se, names=assoc.names)


# ------------------------------------------------------------------ the linear core
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_slope_is_the_refit_on_corrected_reduced_forms(seed):
    # refit, common practice: first-order weights do not involve b_y, so refitting IVW on
    # b_y − α is exactly β̂ − w̃'α
    assoc = table(seed, sign_mix=True)
    core = pi.linear_ivw(assoc)
    alpha = np.random.default_rng(seed + 10).normal(0, 0.02, assoc.count)
    refit = ivw(shifted(assoc, alpha))
    assert core.estimate - core.slope @ alpha == pytest.approx(refit.estimate, rel=1e-12,
                                                               abs=1e-14)
    assert core.se == pytest.approx(refit.se_fixed, rel=1e-12)


def test_zero_allowance_gives_the_ivw_interval():
    # common practice, no source: no direct effect leaves the IVW interval
    assoc = table(3)
    fit = ivw(assoc)
    for rng in ("0:0", "0:0se", "0:0rf"):
        res = pi.direct_effects(assoc, rng)
        assert res.union_ci.low == pytest.approx(fit.ci_fixed.low, rel=1e-12)
        assert res.union_ci.high == pytest.approx(fit.ci_fixed.high, rel=1e-12)
        assert res.bias_aware.ci.low == pytest.approx(fit.ci_fixed.low, rel=1e-12)
        assert res.identified_set.low == res.identified_set.high == pytest.approx(fit.estimate)
    random = pi.direct_effects(assoc, "0:0", se="random")
    assert random.union_ci.high == pytest.approx(fit.ci_random.high, rel=1e-12)


# ------------------------------------------------------------------ against cvxpy
def cvxpy_range(slope, lows=None, highs=None, a=None, b=None):
    """Reference library: cvxpy with CLARABEL, min and max of slope'α over the set."""
    import cvxpy as cp

    alpha = cp.Variable(slope.size)
    cons = [a @ alpha <= b] if a is not None else [alpha >= lows, alpha <= highs]
    lo = cp.Problem(cp.Minimize(slope @ alpha), cons)
    hi = cp.Problem(cp.Maximize(slope @ alpha), cons)
    lo.solve(solver="CLARABEL")
    hi.solve(solver="CLARABEL")
    return lo.value, hi.value


@pytest.mark.parametrize("seed", range(4))
def test_box_closed_form_matches_cvxpy(seed):
    assoc = table(seed, sign_mix=True)
    core = pi.linear_ivw(assoc)
    allowance = ps.box_allowance(assoc, "-0.5:1.5se")
    lo, hi = cvxpy_range(core.slope, allowance.lows, allowance.highs)
    m, big = ps.allowance_range(allowance, core.slope)
    assert m == pytest.approx(lo, rel=1e-7, abs=1e-10)
    assert big == pytest.approx(hi, rel=1e-7, abs=1e-10)
    res = pi.direct_effects(assoc, allowance)
    assert res.identified_set.low == pytest.approx(core.estimate - hi, rel=1e-7)
    assert res.union_ci.high == pytest.approx(core.estimate - lo + core.z * core.se, rel=1e-7)


@pytest.mark.parametrize("seed", range(3))
def test_polytope_linear_programmes_match_cvxpy(seed):
    # a budget polytope: Σ|α_j| ≤ c written as rows, plus per-instrument caps (random)
    assoc = table(seed, count=6)
    core = pi.linear_ivw(assoc)
    rng = np.random.default_rng(seed)
    rows = rng.normal(size=(10, assoc.count))
    bound = rng.uniform(0.01, 0.05, 10)
    a = np.vstack([rows, np.eye(assoc.count), -np.eye(assoc.count)])
    b = np.concatenate([bound, np.full(assoc.count, 0.03), np.full(assoc.count, 0.03)])
    allowance = ps.polytope_allowance(assoc, a, b)
    lo, hi = cvxpy_range(core.slope, a=a, b=b)
    m, big = ps.allowance_range(allowance, core.slope)
    assert (m, big) == (pytest.approx(lo, abs=1e-8), pytest.approx(hi, abs=1e-8))
    res = pi.direct_effects(assoc, allowance)
    assert res.bias_aware.ci.width <= res.union_ci.width + 1e-12


def test_polytope_file_and_box_agree(tmp_path):
    # common practice: a polytope written as the box's 2J rows gives the box's answers
    assoc = table(5, count=4)
    box = ps.box_allowance(assoc, "-1:2se")
    lines = [",".join([*assoc.names, "bound"])]
    for j in range(assoc.count):
        e = ["0"] * assoc.count
        e[j] = "1"
        lines.append(",".join(e + [repr(float(box.highs[j]))]))
        e[j] = "-1"
        lines.append(",".join(e + [repr(float(-box.lows[j]))]))
    path = tmp_path / "poly.csv"
    path.write_text("\n".join(lines) + "\n")
    poly = ps.read_polytope_allowance(path, assoc)
    assert np.allclose(poly.lows, box.lows) and np.allclose(poly.highs, box.highs)
    a, b = pi.direct_effects(assoc, box), pi.direct_effects(assoc, poly)
    assert a.union_ci.low == pytest.approx(b.union_ci.low, rel=1e-9)
    assert a.bias_aware.ci.high == pytest.approx(b.bias_aware.ci.high, rel=1e-9)
    assert a.breakdown.scale == pytest.approx(b.breakdown.scale, rel=1e-9)
    assert b.breakdown.allowance is None and b.to_dict()["direct_set"]["kind"] == "polytope"


# ------------------------------------------------------------------ invariants
def test_curve_widens_and_bias_aware_is_never_longer():
    assoc = table(7, sign_mix=True)
    res = pi.direct_effects(assoc, "-1:3se", points=41)
    c = res.curve
    assert np.all(np.diff(c.lower) <= 1e-15) and np.all(np.diff(c.upper) >= -1e-15)
    assert np.all(np.diff(c.ba_upper - c.ba_lower) >= -1e-12)
    assert np.all(c.ba_upper - c.ba_lower <= c.upper - c.lower + 1e-12)
    assert np.all((c.id_lower >= c.lower) & (c.id_upper <= c.upper))
    assert c.lower[-1] == pytest.approx(res.union_ci.low)


@pytest.mark.parametrize("threshold", [0.0, 0.1])
def test_breakdown_scales_touch_the_threshold(threshold):
    from scipy.stats import foldnorm

    assoc = table(8)
    res = pi.direct_effects(assoc, "-1:1se", threshold=threshold)
    b, core = res.breakdown, res.core
    assert b.conclusion.endswith(f"> {threshold:g}")
    t = b.scale
    assert pi.union_at(core, res.bias_range, t).low == pytest.approx(threshold, abs=1e-12)
    assert pi.union_at(core, res.bias_range, 0.999 * t).low > threshold
    tb = b.bias_aware_scale
    assert tb >= t
    # reference library: scipy.stats.foldnorm, the 95% quantile of |N(B/s, 1)|
    bias = tb * 0.5 * (res.bias_range[1] - res.bias_range[0])
    cv = foldnorm.ppf(0.95, bias / core.se)
    centre = core.estimate - tb * 0.5 * sum(res.bias_range)
    assert centre - cv * core.se == pytest.approx(threshold, abs=1e-8)
    # in the user's unit (multiples of the SE): scale × 1; in outcome units: × s_y,j
    assert b.allowance == pytest.approx(t)
    assert np.allclose(b.direct_outcome, t * assoc.reduced_form_se)


def test_alone_breakdown_touches_the_threshold():
    assoc = table(9, sign_mix=True)
    res = pi.direct_effects(assoc, "-1:1")
    core = res.core
    for j, (lo, hi) in enumerate(zip(res.breakdown.direct_lower, res.breakdown.direct_upper)):
        value = lo if lo is not None else hi
        assert (lo is None) != (hi is None)
        low_end = core.estimate - core.slope[j] * value - core.z * core.se
        assert low_end == pytest.approx(0.0, abs=1e-12)


def test_mirror_and_scaling():
    # common practice: a negative estimate is the mirror image; scaling y scales every bound
    assoc = table(10)
    res = pi.direct_effects(assoc, "-1:1se")
    neg = check_associations(first_stage=assoc.first_stage, first_stage_se=assoc.first_stage_se,
                             reduced_form=-assoc.reduced_form,
                             reduced_form_se=assoc.reduced_form_se)
    mirrored = pi.direct_effects(neg, "-1:1se")
    assert mirrored.breakdown.scale == pytest.approx(res.breakdown.scale, rel=1e-12)
    assert mirrored.breakdown.bias_aware_scale == pytest.approx(res.breakdown.bias_aware_scale,
                                                                rel=1e-9)
    assert mirrored.union_ci.low == pytest.approx(-res.union_ci.high, rel=1e-12)
    assert mirrored.breakdown.conclusion.endswith("< 0")
    big = check_associations(first_stage=assoc.first_stage, first_stage_se=assoc.first_stage_se,
                             reduced_form=1000 * assoc.reduced_form,
                             reduced_form_se=1000 * assoc.reduced_form_se)
    scaled = pi.direct_effects(big, "-1:1se")
    assert scaled.union_ci.low == pytest.approx(1000 * res.union_ci.low, rel=1e-10)
    assert scaled.breakdown.scale == pytest.approx(res.breakdown.scale, rel=1e-10)


def test_no_conclusion_and_never():
    assoc = table(11, beta=0.0)
    res = pi.direct_effects(assoc, "-1:1se", threshold=5.0)
    assert res.breakdown.conclusion.endswith("< 5") and res.breakdown.scale > 1.0
    # the set only pushes the estimate up: a conclusion "> θ" never breaks
    up = pi.direct_effects(table(12), "-1:0se")
    assert up.breakdown.scale is None and up.breakdown.bias_aware_scale is None
    d = up.to_dict()
    assert d["breakdown"]["scale"] is None and d["curve_extended"] is None
    inside = pi.direct_effects(assoc, "-1:1se", threshold=float(ivw(assoc).estimate))
    assert inside.breakdown.scale == 0.0 and inside.breakdown.bias_aware_scale == 0.0
    assert inside.breakdown.conclusion.startswith("none")


def test_extended_curve_reaches_a_far_breakdown():
    res = pi.direct_effects(table(13), "-0.1:0.1se")
    assert res.breakdown.scale > 1.0
    assert res.curve_extended.scale[-1] == pytest.approx(
        pi.EXTEND_FACTOR * res.breakdown.bias_aware_scale)


def test_units_rf_with_negative_reduced_forms():
    assoc = table(14, sign_mix=True)
    allowance = ps.box_allowance(assoc, "0:0.2rf")
    expected_low = np.minimum(0.0, 0.2 * assoc.reduced_form)
    assert np.allclose(allowance.lows, expected_low)
    assert np.all(allowance.lows <= allowance.highs)


@pytest.mark.parametrize("text, words", [("-1:1sd", "unknown unit suffix 'sd'"),
                                         ("1:-1", "exceeds HIGH"), ("abc", "not a range"),
                                         ("-1:1e999", "finite")])
def test_bad_ranges(text, words):
    with pytest.raises(InputError, match=words):
        ps.parse_allowance(text)


def test_bad_polytopes(tmp_path):
    assoc = table(15, count=3)
    with pytest.raises(InputError, match="empty"):
        pi.direct_effects(assoc, ps.polytope_allowance(assoc, [[1, 0, 0], [-1, 0, 0]],
                                                       [-1.0, -1.0]))
    with pytest.raises(InputError, match="unbounded"):
        pi.direct_effects(assoc, ps.polytope_allowance(assoc, [[1, 0, 0]], [1.0]))
    path = tmp_path / "p.csv"
    path.write_text("v0,v1,bound\n1,0,1\n")
    with pytest.raises(InputError, match="lacks column"):
        ps.read_polytope_allowance(path, assoc)
    with pytest.raises(InputError, match="points"):
        pi.direct_effects(assoc, "-1:1", points=1)
    assert math.isfinite(pi.direct_effects(assoc, "-1:1").union_ci.low)


def test_coverage_at_the_worst_corner():
    # Monte Carlo, seed 7, 4000 tables: first stage known (the first-order weights' premise),
    # reduced forms normal around β b_x + α with α at the corner of the box that biases the
    # IVW estimate most.  The bias-aware interval then covers at its nominal 95% (exact for a
    # normal estimate with known se, Armstrong & Kolesár 2021), the union at least at 95%.
    base = table(16, count=10)
    bx, sy = base.first_stage, base.reduced_form_se
    core = pi.linear_ivw(base)
    alpha = np.where(core.slope > 0, 1.0, -1.0) * sy          # the corner of -1:1se
    rng = np.random.default_rng(7)
    beta, hits_ba, hits_union, reps = 0.3, 0, 0, 4000
    for _ in range(reps):
        assoc = check_associations(first_stage=bx, first_stage_se=base.first_stage_se,
                                   reduced_form=beta * bx + alpha + rng.normal(0.0, sy),
                                   reduced_form_se=sy)
        fit = pi.linear_ivw(assoc)
        bias = ps.allowance_range(ps.box_allowance(assoc, "-1:1se"), fit.slope)
        hits_ba += pi.bias_aware_at(fit, bias, 1.0).ci.contains(beta)
        hits_union += pi.union_at(fit, bias, 1.0).contains(beta)
    se = np.sqrt(0.95 * 0.05 / reps)
    assert abs(hits_ba / reps - 0.95) < 3.5 * se
    assert hits_union / reps >= 0.95 - 3.5 * se
