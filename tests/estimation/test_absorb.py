"""Absorbed fixed effects (``Spec.absorb``) against explicit indicator columns and pyfixest.

* reference library: linearmodels ``IV2SLS`` on the same model with 0/1 dummy columns built by
  pandas (first level of each fixed effect dropped, a constant kept), ``debiased`` as ``small``
  (its count of parameters then includes every dummy, as sensiv's does); agreement at 1e-8 on
  coefficients and standard errors (the issue's contract);
* reference library: pyfixest ``feols("y ~ w1 | f1 + f2 + f3 | x ~ z")`` with its default
  small-sample convention ``ssc(k_adj=True, k_fixef="nonnested", G_adj=True)`` — cluster
  covariance times ``G/(G−1) · (n−1)/(n−k)`` with ``k`` the slopes plus ``Σ L_j − (J − 1)``
  fixed-effect levels, those of a fixed effect nested in the cluster variable left out (its
  ``utils.ssc`` / ``get_ssc`` documentation) — which is sensiv's ``small=True`` count;
  agreement at 1e-6 (the issue's contract);
* singleton dropping, nestedness and the properties (one-level fixed effect, relabelled
  levels, streamed equals in memory) are common practice, no source.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from sensiv.core.errors import InputError, WeakInstrumentWarning
from sensiv.data import Spec, from_file, from_frame
from sensiv.estimation import absorb as fe
from sensiv.estimation import iv
from sensiv.estimation.absorbed_source import absorb_source

linearmodels = pytest.importorskip("linearmodels")
from linearmodels.iv import IV2SLS  # noqa: E402

REL = 1e-8
COV_NAMES = {"classic": "unadjusted", "robust": "robust", "cluster": "clustered"}


def simulated(n: int = 700, seed: int = 3, levels=(30, 8)) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    f1 = rng.integers(0, levels[0], n)
    f2 = rng.integers(0, levels[1], n)
    a1, a2 = rng.normal(size=levels[0])[f1], rng.normal(size=levels[1])[f2]
    z = rng.normal(size=n) + 0.5 * a1
    w1 = rng.normal(size=n) + a2
    u = rng.normal(size=n)
    x = z + 0.5 * u + a1 - a2 + rng.normal(size=n)
    y = 1.0 + 2.0 * x + 0.3 * w1 + a1 - a2 + u * (1 + 0.5 * np.abs(z))
    return pd.DataFrame({"y": y, "x": x, "z": z, "w1": w1,
                         "f1": [f"county{v}" for v in f1], "f2": f2,
                         "g": rng.integers(0, 70, n), "wt": rng.uniform(0.5, 2.0, n)})


def dummies_reference(frame, effects, se, small, weight=None):
    dummies = pd.get_dummies(frame[list(effects)].astype(str), drop_first=True).astype(float)
    exog = pd.concat([frame[["w1"]].assign(const=1.0), dummies], axis=1)
    model = IV2SLS(frame["y"], exog, frame[["x"]], frame[["z"]],
                   weights=None if weight is None else frame[weight])
    kwargs = {"cov_type": COV_NAMES[se], "debiased": small}
    if se == "cluster":
        kwargs["clusters"] = frame["g"]
    return model.fit(**kwargs)


def quiet_fit(data, spec=None, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        return iv.fit(data, spec, **kwargs)


def spec_of(effects, se="robust", weight=None, **extra):
    return Spec("y", ["x"], ["z"], controls=["w1"], absorb=effects,
                cluster="g" if se == "cluster" else None, weight=weight, **extra)


@pytest.mark.parametrize("effects", [("f1",), ("f1", "f2")])
@pytest.mark.parametrize("se", ["classic", "robust", "cluster"])
@pytest.mark.parametrize("weight", [None, "wt"])
def test_absorbed_equals_dummy_columns(effects, se, weight):
    frame = simulated()
    for small in (False, True):
        ref = dummies_reference(frame, effects, se, small, weight)
        got = quiet_fit(frame, spec_of(effects, se, weight), se=se, small=small)
        for name in ("x", "w1"):
            assert got.tsls.value(name) == pytest.approx(ref.params[name], rel=REL)
            assert got.tsls.std_error(name) == pytest.approx(ref.std_errors[name], rel=REL)
        assert got.n == ref.nobs
        assert "const" not in got.reported_names()


def test_streamed_one_way_equals_in_memory(tmp_path):
    frame = simulated()
    path = tmp_path / "d.csv"
    frame.to_csv(path, index=False)
    spec = spec_of(("f1",), "cluster", "wt")
    memory = quiet_fit(frame, spec, small=True)
    streamed_source = absorb_source(from_file(path, spec, chunk_rows=97))
    assert streamed_source.absorption.streamed
    streamed = quiet_fit(streamed_source, small=True)
    assert streamed.tsls.value("x") == pytest.approx(memory.tsls.value("x"), rel=1e-12)
    assert streamed.tsls.std_error("x") == pytest.approx(memory.tsls.std_error("x"), rel=1e-12)
    assert streamed.to_dict()["absorbed"] == memory.to_dict()["absorbed"]


def test_streamed_two_way_loads_and_matches(tmp_path):
    frame = simulated()
    path = tmp_path / "d.csv"
    frame.to_csv(path, index=False)
    spec = spec_of(("f1", "f2"), "cluster")
    memory = quiet_fit(frame, spec)
    streamed = quiet_fit(from_file(path, spec, chunk_rows=101))
    assert streamed.tsls.value("x") == pytest.approx(memory.tsls.value("x"), rel=1e-9)
    assert streamed.tsls.std_error("x") == pytest.approx(memory.tsls.std_error("x"), rel=1e-9)


def test_json_keys_and_assumptions():
    frame = simulated()
    out = quiet_fit(frame, spec_of(("f1", "f2"))).to_dict()
    assert out["absorbed"] == {"f1": 30, "f2": 8}
    assert out["n_singletons"] == 0
    assert out["absorb_iterations"] >= 1
    assert 0.0 <= out["absorb_tolerance"] <= fe.DEFAULT_TOLERANCE
    assert any("'f1'" in a and "'f2'" in a for a in out["assumptions"])
    plain = quiet_fit(frame, Spec("y", ["x"], ["z"], controls=["w1"])).to_dict()
    assert "absorbed" not in plain and "n_singletons" not in plain  # absent when nothing is


def test_constant_fixed_effect_changes_nothing():
    frame = simulated().assign(one="all")
    base = quiet_fit(frame, spec_of(("f1",)), small=True)
    more = quiet_fit(frame, spec_of(("f1", "one")), small=True)
    assert more.tsls.value("x") == pytest.approx(base.tsls.value("x"), rel=1e-9)
    assert more.tsls.std_error("x") == pytest.approx(base.tsls.std_error("x"), rel=1e-9)


def test_relabelled_levels_change_nothing():
    frame = simulated()
    rng = np.random.default_rng(5)
    relabel = dict(zip(sorted(set(frame["f1"])), rng.permutation(1000)[:30]))
    other = frame.assign(f1=frame["f1"].map(relabel)).sample(frac=1.0, random_state=1)
    a = quiet_fit(frame, spec_of(("f1", "f2")), small=True)
    b = quiet_fit(other, spec_of(("f1", "f2")), small=True)
    assert b.tsls.value("x") == pytest.approx(a.tsls.value("x"), rel=1e-9)
    assert b.tsls.std_error("x") == pytest.approx(a.tsls.std_error("x"), rel=1e-9)


def test_singletons_dropped_and_counted():
    frame = simulated()
    frame.loc[:4, "f1"] = [f"alone{j}" for j in range(5)]  # five levels of one row each
    out = quiet_fit(frame, spec_of(("f1",)))
    assert out.to_dict()["n_singletons"] == 5
    assert out.n == len(frame) - 5
    kept = frame.iloc[5:]
    ref = dummies_reference(kept, ("f1",), "robust", False)
    assert out.tsls.value("x") == pytest.approx(ref.params["x"], rel=REL)


def test_singleton_iteration_for_several_effects():
    # Row 0 is alone in f1 level 0; once it goes, row 1 is alone in f2 level 9, and then
    # row 2 alone in f1 level 1.
    f1 = np.array([0, 1, 1, 2, 2])
    f2 = np.array([9, 9, 3, 3, 3])
    keep = fe.singleton_rows([f1, f2])
    assert keep.tolist() == [False, False, False, True, True]


def test_instrument_absorbed_is_refused():
    frame = simulated()
    frame["grant"] = frame["f1"].str.len().astype(float)  # constant within each county
    spec = Spec("y", ["x"], ["grant"], controls=["w1"], absorb=["f1"])
    with pytest.raises(InputError, match="instrument 'grant' does not vary within 'f1'"):
        iv.fit(frame, spec)
    with pytest.raises(InputError, match="instrument 'grant' does not vary within 'f1'"):
        iv.fit(frame, Spec("y", ["x"], ["grant"], controls=["w1"], absorb=["f2", "f1"]))


def test_control_absorbed_is_dropped_with_a_note():
    frame = simulated()
    frame["region"] = frame["f2"] % 3
    out = quiet_fit(frame, Spec("y", ["x"], ["z"], controls=["w1", "region"], absorb=["f2"]))
    assert "region" not in out.controls
    assert any("'region'" in note and "dropped" in note for note in out.notes)


def test_nested_fixed_effect_not_counted_under_clusters():
    frame = simulated()
    frame["g"] = frame["f2"] // 3  # every level of f2 lies in one cluster
    got = quiet_fit(frame, spec_of(("f1", "f2"), "cluster"), small=True)
    assert got.absorbed_parameters == 29  # f1: 30 − 1 counted, f2 nested: nothing
    robust = quiet_fit(frame, spec_of(("f1", "f2"), "robust"), small=True)
    assert robust.absorbed_parameters == 29 + 7


def test_absorb_tolerance_is_checked():
    with pytest.raises(InputError, match="tolerance"):
        iv.fit(simulated(), spec_of(("f1", "f2")), absorb_tolerance=2.0)


def test_alternating_projections_converge_to_the_projection():
    # The demeaned columns are the residuals of a least-squares fit on both sets of dummies
    # (Frisch–Waugh–Lovell), computed here with numpy's lstsq: common practice, no source.
    frame = simulated(n=500, levels=(30, 8))
    codes = [pd.factorize(frame[c])[0] for c in ("f1", "f2")]
    d = np.hstack([np.eye(30)[codes[0]], np.eye(8)[codes[1]]])
    values = frame[["y", "x"]].to_numpy(copy=True)
    expected = values - d @ np.linalg.lstsq(d, values, rcond=None)[0]
    got, steps, achieved = fe.demean_columns(np.asfortranarray(values), codes, [30, 8], None)
    assert np.max(np.abs(got - expected)) < 1e-8 * np.max(np.abs(expected))
    assert achieved <= fe.DEFAULT_TOLERANCE and steps >= 1


pyfixest = pytest.importorskip("pyfixest")


def three_way(n: int = 8_000, seed: int = 8) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    f1, f2, f3 = rng.integers(0, 1000, n), rng.integers(0, 200, n), rng.integers(0, 20, n)
    a = rng.normal(size=1000)[f1] + rng.normal(size=200)[f2] + rng.normal(size=20)[f3]
    z = rng.normal(size=n) + 0.3 * a
    w1 = rng.normal(size=n)
    u = rng.normal(size=n)
    x = z + 0.5 * u + a + rng.normal(size=n)
    y = 2.0 * x + 0.3 * w1 + a + u
    return pd.DataFrame({"y": y, "x": x, "z": z, "w1": w1, "f1": f1, "f2": f2, "f3": f3,
                         "g": rng.integers(0, 150, n)})


def test_three_fixed_effects_match_pyfixest():
    frame = three_way()
    ref = pyfixest.feols("y ~ w1 | f1 + f2 + f3 | x ~ z", data=frame, vcov={"CRV1": "g"},
                         fixef_tol=1e-12)
    got = quiet_fit(frame, Spec("y", ["x"], ["z"], controls=["w1"],
                                absorb=["f1", "f2", "f3"], cluster="g"), small=True)
    coef, se = ref.coef(), ref.se()
    for name in ("x", "w1"):
        assert got.tsls.value(name) == pytest.approx(coef[name], rel=1e-6)
        assert got.tsls.std_error(name) == pytest.approx(se[name], rel=1e-6)


def test_nested_cluster_matches_pyfixest():
    frame = three_way()
    frame["g"] = frame["f3"]  # f3 nested in (equal to) the cluster variable
    ref = pyfixest.feols("y ~ w1 | f1 + f2 + f3 | x ~ z", data=frame, vcov={"CRV1": "g"},
                         fixef_tol=1e-12)
    got = quiet_fit(frame, Spec("y", ["x"], ["z"], controls=["w1"],
                                absorb=["f1", "f2", "f3"], cluster="g"), small=True)
    assert got.tsls.std_error("x") == pytest.approx(ref.se()["x"], rel=1e-6)


def test_without_constant_the_count_is_the_same_model():
    # reference library: linearmodels with every dummy of f1 and no constant (the same column
    # space as a constant and all but one dummy); debiased counts all of them
    frame = simulated()
    dummies = pd.get_dummies(frame["f1"]).astype(float)
    ref = IV2SLS(frame["y"], pd.concat([frame[["w1"]], dummies], axis=1), frame[["x"]],
                 frame[["z"]]).fit(cov_type="robust", debiased=True)
    got = quiet_fit(frame, spec_of(("f1",), constant=False), small=True)
    assert got.tsls.std_error("x") == pytest.approx(ref.std_errors["x"], rel=REL)


def test_missing_fixed_effect_label_drops_the_row():
    frame = simulated()
    frame["f1"] = frame["f1"].astype(object)
    frame.loc[[3, 8], "f1"] = None
    out = quiet_fit(frame, spec_of(("f1",)))
    assert out.n_dropped == 2 and out.n == len(frame) - 2


def test_non_convergence_is_a_warning_with_the_numbers():
    from sensiv.core.errors import AbsorbConvergenceWarning

    source = from_frame(simulated(), spec_of(("f1", "f2")))
    with pytest.warns(AbsorbConvergenceWarning, match=r"stopped after 1 step at a relative change"):
        absorb_source(source, tolerance=1e-17, max_iterations=1)


def test_level_codes_renumber_consecutively():
    """Codes are ``intp`` (what ``np.bincount`` takes without a conversion); after rows are
    removed they are renumbered 0..L−1 in the same order (common practice, no source)."""
    from sensiv.estimation import absorb as fe

    codes, n = fe.encode(np.array(["b", "a", "b", "c", "a"], dtype=object))
    assert codes.dtype == np.intp and n == 3 and codes.tolist() == [0, 1, 0, 2, 1]
    again, m = fe.recode(codes[[0, 3, 2]])          # level "a" (code 1) gone
    assert again.dtype == np.intp and m == 2 and again.tolist() == [0, 1, 0]
