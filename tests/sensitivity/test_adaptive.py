"""Falsification adaptive set (Masten & Poirier 2021) for one treatment, several instruments.

Sources beside each check:
* Masten & Poirier (2021), definition of the falsification frontier and adaptive set (from
  memory); the closed form [min_k β_k, max_k β_k] is derived in
  ``sensiv/sensitivity/adaptive.py`` and checked here against the linear programmes and
  against a brute-force search of the frontier;
* reference library: linearmodels ``IV2SLS`` (single-instrument estimates with the other
  instruments as controls; the 2SLS point with one instrument);
* common practice, no source: simulations of valid and invalid instruments, invariances.
"""

from __future__ import annotations

import json
import warnings

import numpy as np
import pandas as pd
import pytest
from linearmodels.iv import IV2SLS

from sensiv.estimation import iv
from sensiv.sensitivity.adaptive import adaptive_from_data, adaptive_set, relaxed_set
from sensiv.sensitivity.adaptive_programmes import closed_form, closed_form_relaxed_set
from sensiv.sensitivity.direct_sets import Scale
from sensiv.sensitivity.robust_set import ReducedForm, reduced_form
from sensiv.data import Spec, from_frame
from sensiv.core.errors import InaccurateSolveWarning, InputError, WeakInstrumentWarning

TOL = 1e-7  # programme against closed form (issue contract)
REL = 1e-8  # agreement with the reference library
COV = {"classic": "unadjusted", "robust": "robust", "cluster": "clustered"}
PI = (0.6, 0.5, -0.4)


def overidentified(n=2000, seed=0, gamma=(0.0, 0.0, 0.0), pi=PI, beta=0.7):
    """One treatment, len(pi) correlated instruments, a control, clusters, heteroskedasticity."""
    rng = np.random.default_rng(seed)
    k = len(pi)
    cov = 0.3 + 0.7 * np.eye(k)
    z = rng.normal(size=(n, k)) @ np.linalg.cholesky(cov).T
    w = rng.normal(size=n)
    v = rng.normal(size=n)
    x = z @ np.asarray(pi) + 0.4 * w + v
    u = 0.6 * v + rng.normal(size=n) * (1 + 0.3 * np.abs(z[:, 0]))
    y = 1.0 + beta * x + z @ np.asarray(gamma) + 0.3 * w + u
    frame = pd.DataFrame({"y": y, "x": x, "w": w, "g": rng.integers(0, 40, n)})
    for j in range(k):
        frame[f"z{j + 1}"] = z[:, j]
    return frame


def spec_for(k, cluster=None):
    return Spec("y", ("x",), tuple(f"z{j + 1}" for j in range(k)), controls=("w",),
                cluster=cluster)


def run(frame, k, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        warnings.simplefilter("error", InaccurateSolveWarning)
        return adaptive_from_data(frame, spec_for(k, kwargs.pop("cluster", None)), **kwargs)


def random_rf(seed, k):
    rng = np.random.default_rng(seed)
    pi = rng.uniform(0.1, 2.0, k) * rng.choice([-1.0, 1.0], k)
    rho = rng.normal(size=k) * rng.uniform(0.1, 10.0)
    eye = np.eye(k)
    scale = Scale(tuple(f"z{j + 1}" for j in range(k)), rho, rng.uniform(0.1, 10.0),
                  rng.uniform(0.1, 10.0, k))
    return ReducedForm(rho, pi, eye, 0.1 * eye, eye, 7.8), scale


def close(a, b, size):
    assert abs(a - b) <= TOL * size, (a, b)


# ------------------------------------------------------------------ programme = closed form
@pytest.mark.parametrize("units", ["effect", "sd"])
@pytest.mark.parametrize("seed", range(12))
def test_programmes_equal_closed_forms(units, seed):
    # derivation in sensiv/sensitivity/adaptive.py (closed forms), against the linear
    # programmes, 1e-7
    k = 2 + seed % 4
    rf, scale = random_rf(seed, k)
    with warnings.catch_warnings():
        warnings.simplefilter("error", InaccurateSolveWarning)
        res = adaptive_set(rf, units=units, scale=scale)
    fas, delta = closed_form(rf, units=units, scale=scale)
    single = rf.rho / rf.pi
    size = np.ptp(single) + np.abs(single).max()
    close(res.adaptive_set.low, fas.low, size)
    close(res.adaptive_set.high, fas.high, size)
    close(res.min_relaxation, delta, delta + 1.0)
    c = np.abs(rf.pi) if units == "effect" else scale.outcome_sd / scale.instrument_sd
    h = c / np.abs(rf.pi)
    for j, s in enumerate(res.singles):
        needed = max(abs(single[j] - single[i]) / h[i] for i in range(k) if i != j)
        close(s.relaxation_if_valid, needed, needed + 1.0)
        close(s.estimate, single[j], size)
    # B(δ*) is the point where the binding intervals meet
    close(res.least_relaxed_point, float(np.max(single - delta * h)), size)
    close(res.least_relaxed_point, float(np.min(single + delta * h)), size)
    for factor in (0.5, 0.99, 1.5, 3.0):
        lp = relaxed_set(rf, factor * delta, units=units, scale=scale)
        cf = closed_form_relaxed_set(rf, factor * delta, units=units, scale=scale)
        if factor < 1:
            # deliberately infeasible: below δ* the relaxed model is still falsified
            assert lp is None and cf is None
        else:
            close(lp.low, cf.low, size)
            close(lp.high, cf.high, size)


def test_effect_units_closed_form_is_half_the_spread():
    # derivation in sensiv/sensitivity/adaptive.py: with |γ_k| ≤ δ|π_k|,
    # δ* = (max β_k − min β_k)/2 and B(δ*) is the midpoint
    rf = ReducedForm(np.array([1.0, -2.0, 4.5]), np.array([0.5, -1.0, 1.5]), np.eye(3),
                     np.zeros((3, 3)), np.eye(3) * 1e-4, 7.8)
    res = adaptive_set(rf)
    assert res.adaptive_set.to_list() == pytest.approx([2.0, 3.0], abs=TOL)
    assert res.min_relaxation == pytest.approx(0.5, abs=TOL)
    assert res.least_relaxed_point == pytest.approx(2.5, abs=TOL)


def test_frontier_by_brute_force_is_the_hull_of_single_estimates():
    # Masten & Poirier (2021) definition (from memory), checked by brute force: on a grid of β,
    # the β whose minimal relaxation vector δ(β)_k = |ρ_k − βπ_k| / c_k is not dominated by any
    # other grid point span [min β_k, max β_k] (to the grid step), whatever the scales c_k
    rng = np.random.default_rng(4)
    rho, pi = rng.normal(size=3), np.array([0.8, -0.5, 1.3])
    single = rho / pi
    grid = np.linspace(single.min() - 2, single.max() + 2, 1201)
    step = grid[1] - grid[0]
    for c in (np.abs(pi), rng.uniform(0.2, 3.0, 3)):
        relax = np.abs(rho[None, :] - grid[:, None] * pi[None, :]) / c       # (G, K)
        weakly = np.all(relax[:, None, :] <= relax[None, :, :], axis=2)      # [i, j]: i ≤ j
        strictly = np.any(relax[:, None, :] < relax[None, :, :], axis=2)
        dominated = np.any(weakly & strictly, axis=0)
        frontier = grid[~dominated]
        assert frontier.min() == pytest.approx(single.min(), abs=step)
        assert frontier.max() == pytest.approx(single.max(), abs=step)
        assert np.all(np.diff(frontier) <= step * 1.0001)  # an interval, no gaps


# ------------------------------------------------------------------ against the data
def test_one_instrument_gives_the_2sls_point():
    # reference library: linearmodels IV2SLS; one instrument cannot be falsified
    frame = overidentified(pi=(0.6,), gamma=(0.0,))
    res = run(frame, 1)
    ref = IV2SLS(frame["y"], frame[["w"]].assign(const=1.0), frame["x"], frame[["z1"]]).fit()
    assert res.adaptive_set.low == pytest.approx(ref.params["x"], rel=1e-10)
    assert res.adaptive_set.high == pytest.approx(ref.params["x"], rel=1e-10)
    assert res.min_relaxation == 0.0
    assert res.singles[0].relaxation_if_valid == 0.0
    assert any("one instrument" in n for n in res.notes)


@pytest.mark.parametrize("se", ["classic", "robust", "cluster"])
def test_single_instrument_estimates_match_reference(se):
    # reference library: linearmodels IV2SLS with instrument k and the other instruments as
    # exogenous controls (the estimands whose range is the adaptive set), estimate and SE 1e-8
    frame = overidentified(gamma=(0.0, 0.1, -0.05))
    cluster = "g" if se == "cluster" else None
    res = run(frame, 3, se=se, cluster=cluster)
    for j, s in enumerate(res.singles):
        others = [f"z{i + 1}" for i in range(3) if i != j]
        kwargs = {"cov_type": COV[se], "debiased": False}
        if cluster:
            kwargs["clusters"] = frame[cluster]
        ref = IV2SLS(frame["y"], frame[["w", *others]].assign(const=1.0), frame["x"],
                     frame[[s.instrument]]).fit(**kwargs)
        assert s.estimate == pytest.approx(ref.params["x"], rel=REL)
        assert s.se == pytest.approx(ref.std_errors["x"], rel=REL)
    lows = [s.estimate for s in res.singles]
    assert res.adaptive_set.low == pytest.approx(min(lows), rel=TOL)
    assert res.adaptive_set.high == pytest.approx(max(lows), rel=TOL)


def _distance_to_tsls(n, reps):
    out = []
    for r in range(reps):
        frame = overidentified(n=n, seed=100 + r)
        res = run(frame, 3, se="classic")
        tsls = iv.fit(frame, spec_for(3), se="classic").tsls.value("x")
        out.append(max(abs(res.adaptive_set.low - tsls), abs(res.adaptive_set.high - tsls)))
    return float(np.mean(out))


def test_valid_instruments_set_shrinks_towards_2sls():
    # common practice, no source: with every instrument valid, the set's ends and 2SLS share
    # one limit, so their distance falls like 1/√n (×100 rows → about ÷10)
    far, near = _distance_to_tsls(400, 5), _distance_to_tsls(40_000, 5)
    assert near < far / 4


@pytest.mark.slow
def test_valid_instruments_set_shrinks_towards_2sls_monte_carlo():
    # common practice, no source: the decline is monotone over several n and close to 1/√n
    sizes = [400, 4000, 40_000, 400_000]
    distance = [_distance_to_tsls(n, 30) for n in sizes]
    assert all(b < a for a, b in zip(distance, distance[1:]))
    for a, b in zip(distance, distance[1:]):
        assert 1.5 < a / b < 7.0  # √10 ≈ 3.16


def test_one_invalid_instrument_among_valid_ones_keeps_the_truth_inside():
    # common practice, no source: β is the estimand of the valid instrument, the invalid ones
    # are biased in opposite directions (+0.3 and −0.375), so β lies inside the set
    frame = overidentified(n=20_000, seed=9, gamma=(0.0, 0.15, 0.15))
    res = run(frame, 3)
    assert res.adaptive_set.low < 0.7 < res.adaptive_set.high
    assert res.adaptive_set.low == pytest.approx(0.7 - 0.375, abs=0.05)
    assert res.adaptive_set.high == pytest.approx(0.7 + 0.3, abs=0.05)
    assert res.confidence_set.contains(0.7)
    assert res.min_relaxation == pytest.approx((0.3 + 0.375) / 2, abs=0.05)


def test_two_instruments_one_invalid_truth_at_the_set_end():
    # common practice, no source: with two instruments the valid one's estimand β is an end
    # of the set, so the estimated set misses β only by sampling error
    frame = overidentified(n=20_000, seed=2, gamma=(0.0, 0.2), pi=(0.6, 0.5))
    res = run(frame, 2)
    valid = res.singles[0]
    assert res.adaptive_set.low == pytest.approx(valid.estimate, rel=TOL)
    gap = max(res.adaptive_set.low - 0.7, 0.7 - res.adaptive_set.high, 0.0)
    assert gap < 4 * valid.se
    assert res.confidence_set.contains(0.7)
    assert res.adaptive_set.high == pytest.approx(0.7 + 0.2 / 0.5, abs=0.05)


# ------------------------------------------------------------------ invariances
def test_units_and_instrument_scaling():
    # common practice, no source: y → 10·y scales the set and the effect-unit relaxation by
    # 10 and leaves the SD-unit relaxation alone; rescaling an instrument changes nothing;
    # row order changes nothing
    frame = overidentified(gamma=(0.0, 0.1, -0.05))
    base = run(frame, 3)
    base_sd = run(frame, 3, units="sd")
    tall = frame.assign(y=10.0 * frame["y"])
    scaled = run(tall, 3)
    scaled_sd = run(tall, 3, units="sd")
    assert scaled.adaptive_set.low == pytest.approx(10 * base.adaptive_set.low, rel=1e-9)
    assert scaled.adaptive_set.high == pytest.approx(10 * base.adaptive_set.high, rel=1e-9)
    assert scaled.min_relaxation == pytest.approx(10 * base.min_relaxation, rel=1e-9)
    assert scaled_sd.min_relaxation == pytest.approx(base_sd.min_relaxation, rel=1e-9)
    stretched = run(frame.assign(z2=7.0 * frame["z2"]), 3, units="sd")
    assert stretched.min_relaxation == pytest.approx(base_sd.min_relaxation, rel=1e-9)
    assert stretched.adaptive_set.low == pytest.approx(base_sd.adaptive_set.low, rel=1e-9)
    shuffled = run(frame.sample(frac=1.0, random_state=1), 3)
    assert shuffled.adaptive_set.high == pytest.approx(base.adaptive_set.high, rel=1e-9)
    # the adaptive set does not depend on the relaxation's units
    assert base_sd.adaptive_set.low == pytest.approx(base.adaptive_set.low, rel=TOL)


def test_relaxed_sets_widen_and_nest():
    # common practice, no source: B(δ) grows with δ, is empty below δ* and inside B(δ') for δ' > δ
    source = from_frame(overidentified(gamma=(0.0, 0.1, -0.05)), spec_for(3))
    result, pieces, sums = iv.fit_with_pieces(source, se="robust", confidence_level=0.95,
                                              small=False)
    rf = reduced_form(pieces, sums, result)
    res = adaptive_set(rf)
    previous = None
    for factor in (1.01, 1.5, 2.0, 4.0):
        cur = relaxed_set(rf, factor * res.min_relaxation)
        assert cur.contains(res.least_relaxed_point)
        if previous is not None:
            assert cur.low <= previous.low and cur.high >= previous.high
        previous = cur
    assert relaxed_set(rf, 0.9 * res.min_relaxation) is None


# ------------------------------------------------------------------ output and bad input
def test_json_keys_and_unbounded_confidence_set():
    # common practice, no source: an instrument with no own first stage makes the confidence
    # set unbounded (JSON null ends) while the estimated set stays finite
    frame = overidentified(gamma=(0.0, 0.0, 0.0), pi=(0.6, 0.5, 0.002), n=800)
    res = run(frame, 3)
    doc = json.loads(json.dumps(res.to_dict(), allow_nan=False))
    assert {"adaptive_set", "min_relaxation", "relaxation", "single_instrument",
            "confidence_set", "assumptions", "caution"} <= set(doc)
    assert len(doc["adaptive_set"]) == 2 and None not in doc["adaptive_set"]
    assert doc["confidence_set"] == [None, None]
    assert any("z3" in n for n in doc["notes"])
    assert "Masten & Poirier" in str(res) and "Caution" in str(res)


def test_wiring_for_sweep_uses_the_sweeps_reduced_form():
    # common practice, no source: the call the sweep makes gives the data-level result
    frame = overidentified(gamma=(0.0, 0.1, -0.05))
    source = from_frame(frame, spec_for(3))
    result, pieces, sums = iv.fit_with_pieces(source, se="robust", confidence_level=0.9,
                                              small=False)
    rf = reduced_form(pieces, sums, result)
    wired = adaptive_set(rf, instruments=pieces.design.instruments,
                         confidence_level=result.confidence_level)
    direct = run(frame, 3, confidence_level=0.9)
    assert wired.to_dict()["adaptive_set"] == pytest.approx(direct.to_dict()["adaptive_set"],
                                                            rel=1e-12)
    assert wired.instruments == ("z1", "z2", "z3")


def test_bad_inputs():
    rf, scale = random_rf(0, 3)
    with pytest.raises(InputError, match="units"):
        adaptive_set(rf, units="share")
    with pytest.raises(InputError, match="scale="):
        adaptive_set(rf, units="sd")
    zero = ReducedForm(rf.rho, np.array([0.5, 0.0, 1.0]), rf.v_rr, rf.v_rp, rf.v_pp, 7.8)
    with pytest.raises(InputError, match="'z2'"):
        adaptive_set(zero, instruments=("z1", "z2", "z3"))
    with pytest.raises(InputError, match="≥ 0"):
        relaxed_set(rf, -1.0)
    with pytest.raises(InputError, match="outside"):
        adaptive_set(rf, confidence_level=1.5)
    frame = overidentified().assign(x2=lambda f: f["x"] + np.random.default_rng(0).normal(
        size=len(f)))
    spec = Spec("y", ("x", "x2"), ("z1", "z2", "z3"), controls=("w",))
    with pytest.raises(InputError, match="one treatment"):
        adaptive_from_data(frame, spec)
