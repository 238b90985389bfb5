"""The per-instrument direct-effect curve against sensiv's ``sweep`` on the same individual data.

Source: common practice — with independent instruments the IVW estimate from per-instrument
associations is close to 2SLS on the individual data (Burgess, Butterworth & Thompson 2013,
Genetic Epidemiology), and the direct effect ``α_j`` of the summary model
``b_{y,j} = β b_{x,j} + α_j`` is the structural ``γ_j`` of ``y = xβ + Zγ + u`` when the
instruments are independent, so the sweep's box over the J instruments with the same ranges is
the same set.

Tolerances, and why they are not tighter: the bias slopes (IVW ``w̃_j`` against 2SLS ``a_j``)
differ only by sampling noise in the weights, so the identified sets agree to 5% of the 2SLS
standard error; the union ends differ by ``z·|se_IVW − se_2SLS|`` plus that, since the IVW
standard error uses each reduced form's residual variance, which includes the treatment's own
variation ``β² var(x | z_j)``, where 2SLS uses the structural residual, and by the growth of
2SLS's own standard error over the set (its residual ``y − Zγ`` moves with ``γ``, while the IVW
weights and standard error are held fixed); the breakdown scales
then agree to 5% (relative).  Simulated data, seed 17, n = 20,000, J = 6.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from sensiv.data import Spec, from_frame
from sensiv.sensitivity import bounds
from sensiv.sensitivity.associations import check_associations, ivw
from sensiv.sensitivity.per_instrument import direct_effects

N, J, BETA, SEED = 20_000, 6, 0.2, 17


def simulated():
    rng = np.random.default_rng(SEED)
    z = rng.normal(size=(N, J))
    strength = rng.uniform(0.05, 0.15, J)
    v = rng.normal(size=N)
    x = z @ strength + v
    y = BETA * x + 0.5 * v + rng.normal(size=N)
    frame = pd.DataFrame({"y": y, "x": x, **{f"z{k + 1}": z[:, k] for k in range(J)}})
    return frame, z, x, y


def marginal(outcome, column):
    """Simple regression with intercept and its classic SE (the per-instrument association)."""
    design = np.column_stack([np.ones(N), column])
    coef = np.linalg.lstsq(design, outcome, rcond=None)[0]
    resid = outcome - design @ coef
    cov = resid @ resid / (N - 2) * np.linalg.inv(design.T @ design)
    return coef[1], np.sqrt(cov[1, 1])


@pytest.fixture(scope="module")
def both():
    frame, z, x, y = simulated()
    bx, sx = zip(*[marginal(x, z[:, k]) for k in range(J)])
    by, sy = zip(*[marginal(y, z[:, k]) for k in range(J)])
    assoc = check_associations(first_stage=bx, first_stage_se=sx, reduced_form=by,
                               reduced_form_se=sy, names=[f"z{k + 1}" for k in range(J)])
    spec = Spec(outcome="y", treatments=("x",), instruments=tuple(assoc.names))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sweep = bounds.sweep(from_frame(frame, spec), direct=["-0.01:0.01"] * J, se="classic",
                             points=11)
    return assoc, direct_effects(assoc, "-0.01:0.01", points=11), sweep


def test_ivw_matches_2sls_within_its_se(both):
    assoc, _, sweep = both
    fit = ivw(assoc)
    assert abs(fit.estimate - sweep.estimate) < sweep.se
    assert abs(fit.estimate - BETA) < 3 * fit.se_fixed


def test_direct_effect_curve_tracks_the_sweep(both):
    _, mine, sweep = both
    se = sweep.se
    assert np.allclose(mine.curve.scale, sweep.curve.scale)
    assert np.all(np.abs(mine.curve.id_lower - sweep.curve.id_lower) < 0.05 * se)
    assert np.all(np.abs(mine.curve.id_upper - sweep.curve.id_upper) < 0.05 * se)
    # plus the growth of 2SLS's own SE over the set (its residual y − Zγ changes with γ, the
    # IVW weights and SE are held fixed): the largest SE over the set minus the one at zero
    grows = sweep.bias_aware.se - se
    assert 0.0 <= grows < 0.1 * se
    slack = 1.96 * (abs(mine.core.se - se) + grows) + 0.05 * se
    assert np.all(np.abs(mine.curve.lower - sweep.curve.lower) < slack)
    assert np.all(np.abs(mine.curve.upper - sweep.curve.upper) < slack)
    assert mine.breakdown.scale == pytest.approx(sweep.breakdown.scale, rel=0.05)
    assert mine.breakdown.bias_aware_scale == pytest.approx(sweep.breakdown.bias_aware_scale,
                                                            rel=0.05)
