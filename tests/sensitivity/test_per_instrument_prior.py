"""A normal prior on per-instrument direct effects, checked from outside.

Sources beside each check:
* refit, common practice, no source: the IVW estimate recomputed by
  :func:`sensiv.sensitivity.associations.ivw` on ``b_y − α`` for a known ``α`` (mean shift) and
  for seeded draws of ``α`` (the mean and variance of the shift, Monte Carlo);
* reference library: scipy.stats ``norm`` for the interval from the mean and variance;
* common practice, no source: invariants (no prior spread gives the IVW interval, widening with
  the prior SD, the map's regions agree with the intervals).
"""

from __future__ import annotations

import numpy as np
import pytest

from sensiv.core.errors import InputError
from sensiv.sensitivity.associations import ivw
from sensiv.sensitivity import per_instrument_prior as pp
from sensiv.sensitivity.per_instrument_sets import unit_factor

from test_per_instrument import shifted, table


def test_point_prior_is_the_refit_at_the_mean():
    # refit: with τ = 0 the interval is the IVW interval of b_y − μ f (weights held fixed)
    assoc = table(1, sign_mix=True)
    for unit in ("", "se", "rf"):
        prior = pp.NormalPrior(0.7, 0.0, unit)
        res = pp.prior_effects(assoc, prior)
        refit = ivw(shifted(assoc, 0.7 * unit_factor(assoc, unit)))
        assert res.interval.low == pytest.approx(refit.ci_fixed.low, rel=1e-10)
        assert res.interval.high == pytest.approx(refit.ci_fixed.high, rel=1e-10)
    zero = pp.prior_effects(assoc, "normal:0:0")
    assert zero.interval == ivw(assoc).ci_fixed


def test_shift_and_spread_match_refits_of_drawn_direct_effects():
    # refit + Monte Carlo (seed 4, 4000 draws): mean and SD of β̂(α) − β̂ over α ~ N(μf, τ²f²)
    from scipy.stats import norm

    assoc = table(2, count=12)
    prior = pp.NormalPrior(0.2, 1.5, "se")
    res = pp.prior_effects(assoc, prior)
    rng = np.random.default_rng(4)
    f = unit_factor(assoc, "se")
    moves = np.array([ivw(shifted(assoc, rng.normal(0.2 * f, 1.5 * f))).estimate
                      for _ in range(4000)]) - ivw(assoc).estimate
    assert moves.mean() == pytest.approx(-0.2 * res.shift, abs=4 * moves.std() / 60)
    assert moves.std(ddof=1) == pytest.approx(1.5 * res.spread, rel=0.05)
    # reference library: scipy.stats.norm, interval from the centre and total SD
    total = np.hypot(res.core.se, 1.5 * res.spread)
    assert res.interval.high == pytest.approx(norm.ppf(0.975, res.center, total), rel=1e-12)
    assert res.sd == pytest.approx(total)


def test_interval_widens_with_the_prior_sd_and_the_map_agrees():
    assoc = table(3)
    widths = [pp.prior_effects(assoc, pp.NormalPrior(0.0, s, "se")).interval.width
              for s in (0.0, 0.5, 1.0, 2.0)]
    assert np.all(np.diff(widths) > 0)
    res = pp.prior_effects(assoc, "normal:0.5:1se", points=21)
    pm = res.prior_map
    assert pm.lower.shape == (21, 21) and pm.axis == pp.AXIS
    for i in (0, 7, 20):
        for j in (0, 10, 20):
            one = pp.prior_effects(assoc, pp.NormalPrior(pm.mean[j], pm.sd[i], "se"))
            assert one.interval.low == pytest.approx(pm.lower[i, j], rel=1e-12)
            assert pm.region[i, j] == one.region
    codes = set(np.unique(pm.region).tolist())
    assert codes == {-1, 0, 1}           # the grid reaches all three regions
    d = res.to_dict()
    assert d["prior_map"]["region"][0][0] in (-1, 0, 1) and d["method"] == "closed-form"


def test_bad_priors():
    assoc = table(4)
    with pytest.raises(InputError, match="SD must be"):
        pp.prior_effects(assoc, "normal:0:-1")
    with pytest.raises(InputError, match="unknown unit suffix 'sd'"):
        pp.parse_normal_prior("normal:0:1sd")
    with pytest.raises(InputError, match="not a normal prior"):
        pp.parse_normal_prior("normal:0")
    assert pp.parse_normal_prior("0:0.01") == pp.NormalPrior(0.0, 0.01, "")
