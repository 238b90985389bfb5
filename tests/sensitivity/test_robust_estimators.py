"""Robust yardsticks from per-instrument associations: MR-Egger, weighted median, mode.

Sources beside each check: MR-Egger against statsmodels WLS with intercept (Bowden, Davey
Smith & Burgess 2015; reference library: statsmodels); the weighted median against a direct
implementation of the interpolated definition in Bowden, Davey Smith, Haycock & Burgess 2016;
the mode-based estimate against a brute-force maximisation of the kernel density of Hartwig,
Davey Smith & Bowden 2017.
"""

from __future__ import annotations

import numpy as np
import pytest

from sensiv.core.errors import InputError
from sensiv.sensitivity import robust_estimators as robust
from sensiv.sensitivity.associations import check_associations


def random_table(seed: int, count: int = 15, invalid: float = 0.0, alpha: float = 0.0,
                 beta: float = 0.4, mixed_signs: bool = True):
    rng = np.random.default_rng(seed)
    bx = rng.uniform(0.05, 0.4, count) * (rng.choice([-1, 1], count) if mixed_signs else 1)
    sx = rng.uniform(0.005, 0.02, count)
    sy = rng.uniform(0.01, 0.03, count)
    direct = np.where(np.arange(count) < round(invalid * count), alpha, 0.0)
    by = beta * bx + direct + rng.normal(0, 1, count) * sy
    return check_associations(first_stage=bx + rng.normal(0, 1, count) * sx, first_stage_se=sx,
                              reduced_form=by, reduced_form_se=sy)


@pytest.mark.parametrize("seed", [11, 12, 13])
def test_egger_matches_statsmodels_wls_with_intercept(seed):
    import statsmodels.api as sm

    a = random_table(seed)
    fit = robust.egger(a)
    sign = np.sign(a.first_stage)
    bx, by = a.first_stage * sign, a.reduced_form * sign   # oriented so b_x > 0 (the paper)
    wls = sm.WLS(by, sm.add_constant(bx), weights=a.reduced_form_se ** -2).fit()
    scale = np.sqrt(wls.scale)
    assert fit.intercept == pytest.approx(wls.params[0], abs=1e-8)
    assert fit.slope == pytest.approx(wls.params[1], abs=1e-8)
    assert fit.residual_scale == pytest.approx(scale, rel=1e-8)
    factor = max(1.0, scale) / scale       # residual scale floored at 1 (module docstring)
    assert fit.intercept_se == pytest.approx(wls.bse[0] * factor, abs=1e-8)
    assert fit.slope_se == pytest.approx(wls.bse[1] * factor, abs=1e-8)
    if scale >= 1:  # then the SEs are statsmodels' own and so are the t p-values
        assert fit.slope_pvalue == pytest.approx(wls.pvalues[1], rel=1e-6)


def test_egger_intercept_finds_planted_directional_pleiotropy():
    # every instrument (first stage > 0) gets the same direct effect 0.05: the intercept
    # estimates it (the paper's InSIDE case; simulation, seed 21)
    a = random_table(21, count=60, invalid=1.0, alpha=0.05, mixed_signs=False)
    fit = robust.egger(a)
    assert fit.intercept_ci.contains(0.05)
    assert fit.slope_ci.contains(0.4)
    assert not fit.intercept_ci.contains(0.0)


def paper_weighted_median(theta, w):
    """Direct transcription of the interpolated definition (Bowden et al. 2016, eq. in
    'weighted median'), loop by loop."""
    pairs = sorted(zip(theta, w / np.sum(w)))
    cumulative, p = 0.0, []
    for _, weight in pairs:
        p.append(cumulative + weight / 2)
        cumulative += weight
    for j in range(len(pairs) - 1):
        if p[j] < 0.5 <= p[j + 1]:
            return pairs[j][0] + (pairs[j + 1][0] - pairs[j][0]) * (0.5 - p[j]) / (p[j + 1] - p[j])
    raise AssertionError("no crossing")


@pytest.mark.parametrize("seed", range(8))
def test_weighted_median_matches_the_papers_definition(seed):
    rng = np.random.default_rng(seed)
    count = int(rng.integers(3, 40))
    theta, w = rng.normal(0, 1, count), rng.uniform(0.1, 5, count)
    assert robust.weighted_median_value(theta, w) == pytest.approx(
        paper_weighted_median(theta, w), abs=1e-8)


def test_weighted_median_equal_weights_odd_count_is_the_median():
    # with equal weights and odd J the interpolation lands on the middle value (the paper)
    theta = np.array([3.0, -1.0, 2.0, 10.0, 0.5])
    assert robust.weighted_median_value(theta, np.ones(5)) == pytest.approx(2.0, abs=1e-12)


def test_weighted_median_covers_truth_with_30_percent_invalid():
    # planted pleiotropy: 30% of 40 instruments with a large direct effect (simulation, seed 7)
    a = random_table(7, count=40, invalid=0.3, alpha=0.3)
    from sensiv.sensitivity.associations import ivw

    wm = robust.weighted_median(a, seed=7, reps=500)
    assert wm.ci.contains(0.4)
    assert not ivw(a).ci_random.contains(0.4)      # the IVW estimate is pulled away
    assert wm.se > 0 and wm.seed == 7


def test_bootstrap_is_reproducible_by_seed():
    a = random_table(3)
    one = robust.weighted_median(a, seed=5, reps=200)
    two = robust.weighted_median(a, seed=5, reps=200)
    other = robust.weighted_median(a, seed=6, reps=200)
    assert one.se == two.se and one.se != other.se
    m1, m2 = robust.mode_based(a, seed=5, reps=100), robust.mode_based(a, seed=5, reps=100)
    assert m1.se == m2.se


def brute_mode(theta, w, h):
    grid = np.linspace(theta.min() - 3 * h, theta.max() + 3 * h, 400_001)
    dens = np.exp(-0.5 * ((grid[:, None] - theta) / h) ** 2) @ (w / w.sum())
    return grid[np.argmax(dens)], grid[1] - grid[0]


@pytest.mark.parametrize("seed", range(4))
def test_mode_matches_brute_force_density_maximum(seed):
    rng = np.random.default_rng(seed)
    theta = np.concatenate([rng.normal(0.4, 0.05, 8), rng.normal(1.5, 0.3, 5)])
    w = rng.uniform(0.5, 2, theta.size)
    h = robust.mode_bandwidth(theta, 1.0)
    expected, step = brute_mode(theta, w, h)
    assert robust.mode_value(theta, w, 1.0) == pytest.approx(expected, abs=2 * step)


def test_mode_bandwidth_is_the_modified_silverman_rule():
    # h = φ 0.9 min(SD, 1.4826 MAD) J^(-1/5) (Hartwig, Davey Smith & Bowden 2017)
    theta = np.array([0.1, 0.2, 0.25, 0.3, 2.0, 3.0])
    sd = np.std(theta, ddof=1)
    mad = 1.4826 * np.median(np.abs(theta - np.median(theta)))
    assert robust.mode_bandwidth(theta, 0.5) == pytest.approx(
        0.5 * 0.9 * min(sd, mad) * 6 ** -0.2, rel=1e-12)


def test_mode_survives_a_majority_of_scattered_invalid_instruments():
    # ZEMPA: 8 valid instruments agree at 0.4, 12 invalid ones scatter (simulation, seed 9)
    rng = np.random.default_rng(9)
    count = 20
    bx = rng.uniform(0.2, 0.4, count)
    alpha = np.where(np.arange(count) < 12, rng.uniform(-0.3, 0.3, count), 0.0)
    sy = np.full(count, 0.002)
    a = check_associations(first_stage=bx, first_stage_se=np.full(count, 0.001),
                           reduced_form=0.4 * bx + alpha + rng.normal(0, 1, count) * sy,
                           reduced_form_se=sy)
    fit = robust.mode_based(a, seed=9, reps=200, phi=0.5)
    assert fit.estimate == pytest.approx(0.4, abs=0.05)


def test_fewer_than_three_instruments():
    a = check_associations(first_stage=[0.1, 0.2], first_stage_se=[0.01] * 2,
                           reduced_form=[0.05, 0.1], reduced_form_se=[0.01] * 2)
    with pytest.raises(InputError, match="MR-Egger needs at least 3 instruments"):
        robust.egger(a)
    yard = robust.yardsticks(a, seed=1)
    assert yard.egger is None and "at least 3" in yard.to_dict()["egger"]["reason"]
    assert yard.to_dict()["mode"]["available"] is False


@pytest.mark.parametrize("kwargs, word", [({"reps": 1}, "--reps"), ({"seed": -1}, "--seed"),
                                          ({"phi": 0.0}, "bandwidth")])
def test_bad_bootstrap_options(kwargs, word):
    with pytest.raises(InputError, match=word):
        robust.mode_based(random_table(1), **kwargs)


def test_bootstrap_rows_match_one_at_a_time():
    # the vectorised bootstrap median equals the scalar definition row by row (same paper)
    rng = np.random.default_rng(2)
    theta, w = rng.normal(0, 1, (20, 9)), rng.uniform(0.1, 3, 9)
    rows = robust.weighted_median_rows(theta, w)
    assert rows == pytest.approx([paper_weighted_median(t, w) for t in theta], abs=1e-10)


def test_egger_is_invariant_to_the_orientation_of_an_instrument():
    # the paper orients every instrument so b_x > 0 first; flipping both signs of one
    # instrument's associations changes nothing (Bowden, Davey Smith & Burgess 2015)
    a = random_table(31)
    flip = np.where(np.arange(a.count) % 3 == 0, -1.0, 1.0)
    b = check_associations(first_stage=a.first_stage * flip, first_stage_se=a.first_stage_se,
                           reduced_form=a.reduced_form * flip, reduced_form_se=a.reduced_form_se)
    one, two = robust.egger(a), robust.egger(b)
    assert two.slope == pytest.approx(one.slope, abs=1e-12)
    assert two.intercept == pytest.approx(one.intercept, abs=1e-12)
    assert robust.weighted_median_value(a.ratios, a.ratio_se() ** -2) == pytest.approx(
        robust.weighted_median_value(b.ratios, b.ratio_se() ** -2), abs=1e-12)


def test_scaling_the_outcome_scales_every_yardstick():
    # invariance: outcome in other units (× 10) scales slope, intercept and estimates by 10
    # (common practice, no source)
    a = random_table(41)
    b = check_associations(first_stage=a.first_stage, first_stage_se=a.first_stage_se,
                           reduced_form=10 * a.reduced_form, reduced_form_se=10 * a.reduced_form_se)
    assert robust.egger(b).slope == pytest.approx(10 * robust.egger(a).slope, rel=1e-10)
    assert robust.egger(b).intercept_se == pytest.approx(10 * robust.egger(a).intercept_se,
                                                         rel=1e-10)
    wa, wb = robust.weighted_median(a, seed=1, reps=50), robust.weighted_median(b, seed=1, reps=50)
    assert wb.estimate == pytest.approx(10 * wa.estimate, rel=1e-10)
    assert wb.se == pytest.approx(10 * wa.se, rel=1e-8)
    ma, mb = robust.mode_based(a, seed=1, reps=20), robust.mode_based(b, seed=1, reps=20)
    assert mb.estimate == pytest.approx(10 * ma.estimate, rel=1e-6)


@pytest.mark.parametrize("seed", range(3))
def test_bootstrap_mode_path_matches_the_exact_grid(seed):
    # the bootstrap rows start from an FFT-binned density; every row must climb to the same
    # maximum as from the exact grid (designed property of the module's two starts)
    rng = np.random.default_rng(seed)
    theta = np.concatenate([rng.normal(0.4, 0.05, 12), rng.normal(1.5, 0.4, 7)])
    w = rng.uniform(0.5, 2, theta.size)
    rows = theta + 0.08 * rng.standard_normal((200, theta.size))
    assert robust.mode_rows(rows, w) == pytest.approx(
        robust.mode_rows(rows, w, exact_start=True), abs=1e-9)
