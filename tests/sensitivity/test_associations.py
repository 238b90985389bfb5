"""IVW and Cochran's Q from per-instrument associations against statsmodels WLS.

Reference: the IVW estimate is the slope of the weighted regression of b_y on b_x through the
origin with weights s_y^-2; its fixed-effect SE is the WLS SE divided by the residual standard
error, and Q is the weighted residual sum of squares (Burgess, Butterworth & Thompson 2013;
reference library: statsmodels WLS).
"""

from __future__ import annotations

import numpy as np
import pytest

from sensiv.core.errors import InputError
from sensiv.sensitivity.associations import check_associations, ivw


def random_table(seed: int, count: int = 12):
    rng = np.random.default_rng(seed)
    bx = rng.uniform(0.05, 0.4, count) * rng.choice([-1, 1], count)
    sx = rng.uniform(0.005, 0.03, count)
    sy = rng.uniform(0.01, 0.05, count)
    by = 0.4 * bx + rng.normal(0, 1, count) * sy * 1.5
    return check_associations(first_stage=bx, first_stage_se=sx, reduced_form=by,
                              reduced_form_se=sy)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_ivw_first_order_matches_wls_through_origin(seed):
    import statsmodels.api as sm

    a = random_table(seed)
    fit = ivw(a, "first")
    wls = sm.WLS(a.reduced_form, a.first_stage[:, None], weights=a.reduced_form_se ** -2).fit()
    scale = np.sqrt(wls.scale)
    assert fit.estimate == pytest.approx(wls.params[0], abs=1e-10)
    assert fit.se_fixed == pytest.approx(wls.bse[0] / scale, rel=1e-8)
    assert fit.q == pytest.approx(wls.ssr, rel=1e-8)
    assert fit.se_random == pytest.approx(fit.se_fixed * max(1.0, scale), rel=1e-8)
    from scipy.stats import chi2  # reference library: scipy
    assert fit.q_pvalue == pytest.approx(chi2.sf(wls.ssr, a.count - 1), rel=1e-8)


def test_second_order_weights_are_the_delta_method():
    # delta-method variance of b_y/b_x with independent estimates (common practice, no source)
    a = random_table(4)
    fit = ivw(a, "second")
    bx, by, sx, sy = a.first_stage, a.reduced_form, a.first_stage_se, a.reduced_form_se
    w = 1 / (sy ** 2 / bx ** 2 + by ** 2 * sx ** 2 / bx ** 4)
    assert fit.estimate == pytest.approx(np.sum(w * by / bx) / w.sum(), rel=1e-10)
    assert fit.se_fixed == pytest.approx(w.sum() ** -0.5, rel=1e-10)
    # each second-order weight is at most the first-order one, so the fixed-effect SE grows
    assert fit.se_fixed >= ivw(a, "first").se_fixed


def test_ivw_is_invariant_to_orientation_and_order():
    a = random_table(5)
    flip = np.array([1, -1] * (a.count // 2), dtype=float)
    b = check_associations(first_stage=a.first_stage * flip, first_stage_se=a.first_stage_se,
                           reduced_form=a.reduced_form * flip,
                           reduced_form_se=a.reduced_form_se)
    perm = np.random.default_rng(0).permutation(a.count)
    c = check_associations(first_stage=a.first_stage[perm], first_stage_se=a.first_stage_se[perm],
                           reduced_form=a.reduced_form[perm],
                           reduced_form_se=a.reduced_form_se[perm])
    for other in (b, c):
        assert ivw(other).estimate == pytest.approx(ivw(a).estimate, rel=1e-12)
        assert ivw(other).q == pytest.approx(ivw(a).q, rel=1e-10)


@pytest.mark.parametrize("change, word", [
    ({"first_stage": [0.1, 0.0, 0.2]}, "first-stage association"),
    ({"reduced_form_se": [0.1, -0.1, 0.1]}, "reduced-form SE"),
    ({"first_stage_se": [0.1, 0.1]}, "first-stage SE"),
])
def test_bad_associations_raise(change, word):
    values = {"first_stage": [0.1, 0.2, 0.3], "first_stage_se": [0.01] * 3,
              "reduced_form": [0.1, 0.2, 0.3], "reduced_form_se": [0.1] * 3, **change}
    with pytest.raises(InputError, match=word):
        check_associations(**values)
