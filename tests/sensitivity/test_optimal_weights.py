"""Optimally weighted bias-aware intervals (Armstrong & Kolesár 2021), checked from outside.

Sources beside each check:
* Frisch–Waugh–Lovell algebra, common practice: the 2SLS weights on the partialled
  instruments' moments give the 2SLS core (itself checked against linearmodels in
  test_bounds.py);
* reference library: linearmodels ``IVGMM`` (two-step efficient GMM with a robust weight
  matrix from the 2SLS residuals) for the traced weights at zero trade-off;
* common practice, no source: with one instrument per treatment both intervals coincide; the
  optimal interval is never longer than the 2SLS-centred one (by construction: the 2SLS
  weights are a candidate); Monte Carlo coverage with the true direct effect at a corner.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from sensiv.core.errors import WeakInstrumentWarning
from sensiv.data import Spec, from_frame
from sensiv.estimation import iv
from sensiv.sensitivity import bias_aware as ba
from sensiv.sensitivity import optimal_weights as ow
from sensiv.sensitivity.direct_sets import box_set
from sensiv.sensitivity.linear_core import build_core, focus_block
from sensiv.sensitivity.union_sets import union_curve_set

from test_bounds import design, run_sweep


def spec_of(k_z, cluster=None):
    return Spec(outcome="y", treatments=("x",), instruments=tuple(f"z{k + 1}" for k in range(k_z)),
                controls=("w",), cluster=cluster)


def pieces_of(frame, k_z, se, cluster=None):
    source = from_frame(frame, spec_of(k_z, cluster))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        result, pieces, sums = iv.fit_with_pieces(
            source, se=se, confidence_level=0.95, small=False,
            extra_blocks=lambda p: [] if se == "classic" else [focus_block(p, 0),
                                                               *ow.moment_block(p, se)])
    return result, pieces, sums, build_core(pieces, sums, result, 0)


@pytest.mark.parametrize("se", ["classic", "robust", "cluster"])
@pytest.mark.parametrize("k_z", [2, 3])
def test_2sls_weights_give_the_2sls_core(se, k_z):
    # Frisch–Waugh–Lovell algebra, common practice
    frame = design(n=400, seed=5, k_z=k_z)
    result, pieces, sums, core = pieces_of(frame, k_z, se, cluster="g")
    m = ow.moment_pieces(pieces, sums, result)
    weighted = ow.weighted_core(m, ow.tsls_weights(m, 0), core)
    assert weighted.estimate == pytest.approx(core.estimate, rel=1e-10)
    assert weighted.slope == pytest.approx(core.slope, rel=1e-9, abs=1e-12)
    assert weighted.quad == pytest.approx(core.quad, rel=1e-8, abs=1e-14)


def test_zero_trade_off_is_efficient_gmm():
    # reference library: linearmodels IVGMM, robust weight matrix from the 2SLS residuals
    # (two steps), estimate to 1e-8; the box is centred at zero so Ω_c is Ω at γ = 0
    from linearmodels.iv import IVGMM

    frame = design(n=600, seed=8, k_z=3, strength=0.6)
    result, pieces, sums, core = pieces_of(frame, 3, "robust")
    m = ow.moment_pieces(pieces, sums, result)
    dset = box_set(core.instruments, [(-0.05, 0.05)] * 3)
    lam, w = ow.trade_off_path(m, dset, ba.set_centre(dset), 0)[0]
    assert lam == 0.0
    ref = IVGMM(frame["y"], frame[["w"]].assign(const=1.0), frame[["x"]],
                frame[["z1", "z2", "z3"]], weight_type="robust").fit(iter_limit=2)
    assert float(w @ m.r) == pytest.approx(float(ref.params["x"]), rel=1e-6)


@pytest.mark.parametrize("se", ["classic", "robust"])
def test_one_instrument_both_coincide(se):
    # common practice, no source: w'G = 1 leaves one weight, so the programme returns 2SLS
    frame = design(n=400, seed=2, k_z=1)
    res = run_sweep(frame, 1, ["-0.05:0.05"], se=se)
    assert res.bias_aware_optimal.interval.ci.to_list() == res.bias_aware.ci.to_list()
    assert res.bias_aware_optimal.length_ratio == 1.0
    assert res.to_dict()["bias_aware_optimal"]["weighting"] == "optimal"
    assert res.to_dict()["bias_aware"]["weighting"] == "2sls"
    # the programme itself (not the short cut) finds the same interval
    result, pieces, sums, core = pieces_of(frame, 1, "classic")
    m = ow.moment_pieces(pieces, sums, result)
    dset = box_set(core.instruments, [(-0.05, 0.05)])
    reference = ba.bias_aware([core], dset, 0.95)
    path = ow.trade_off_path(m, dset, ba.set_centre(dset), 0)
    assert path
    for _, w in path:
        traced = ba.bias_aware([ow.weighted_core(m, w, core)], dset, 0.95)
        assert traced.ci.to_list() == pytest.approx(reference.ci.to_list(), rel=1e-6)


def test_json_keys_and_text():
    frame = design(n=500, seed=4, k_z=3)
    res = run_sweep(frame, 3, ["-0.05:0.05", "-0.02:0.02", "0:0.04"])
    doc = res.to_dict()["bias_aware_optimal"]
    for key in ("ci", "estimate", "max_bias", "se", "critical_value", "weighting",
                "length_ratio", "weights", "trade_off", "method"):
        assert key in doc
    assert set(doc["weights"]) == {"z1", "z2", "z3"}
    assert "optimal weights" in str(res)
    opt = res.bias_aware_optimal
    # its worst-case bias is that of its weights over the box (box centre, |D'w|'h)
    result, pieces, sums, core = pieces_of(frame, 3, "robust")
    m = ow.moment_pieces(pieces, sums, result)
    slope = m.d.T @ np.array(opt.weights)
    assert opt.interval.max_bias == pytest.approx(float(np.abs(slope) @ [0.05, 0.02, 0.02]),
                                                  rel=1e-9)


@settings(max_examples=12, deadline=None)
@given(seed=st.integers(0, 10_000), k_z=st.sampled_from([2, 3]),
       half=st.floats(0.0, 0.3), se=st.sampled_from(["robust", "cluster"]))
def test_never_longer_than_the_2sls_centred_interval(seed, k_z, half, se):
    # common practice, no source (the 2SLS weights are one candidate of the search)
    frame = design(n=300, seed=seed, k_z=k_z)
    res = run_sweep(frame, k_z, [f"{-half}:{half}"] + ["-0.01:0.02"] * (k_z - 1), se=se,
                    cluster="g" if se == "cluster" else None)
    opt, two = res.bias_aware_optimal, res.bias_aware
    assert opt.interval.ci.width <= two.ci.width * (1 + 1e-12)
    assert opt.length_ratio is None or opt.length_ratio <= 1.0 + 1e-12


# ------------------------------------------------------------------ coverage (simulation)
K_Z = 3
HALF = 0.1            # Γ = [−0.1, 0.1]³; the truth at the corner (0.1, 0.1, 0.1)
BETA = 0.5


def _draw(rng, n, clusters):
    g = rng.integers(0, clusters, n) if clusters else np.arange(n)
    z = rng.normal(size=(n, K_Z))
    w, v = rng.normal(size=n), rng.normal(size=n)
    x = z @ np.full(K_Z, 0.5) + 0.5 * w + v
    shock = rng.normal(size=clusters)[g] if clusters else 0.0
    u = 0.1 * v + rng.normal(size=n) * (1 + 0.3 * np.abs(z[:, 0])) + 0.5 * shock
    y = 1.0 + BETA * x + 0.3 * w + z @ np.full(K_Z, HALF) + u
    frame = pd.DataFrame({"y": y, "x": x, "w": w, "g": g})
    for k in range(K_Z):
        frame[f"z{k + 1}"] = z[:, k]
    return frame


def _coverage(reps, se, seed, n=250):
    rng = np.random.default_rng(seed)
    dset = box_set(tuple(f"z{k + 1}" for k in range(K_Z)), [(-HALF, HALF)] * K_Z)
    hits, to_union, to_2sls = 0, [], []
    for _ in range(reps):
        frame = _draw(rng, n, 50 if se == "cluster" else 0)
        result, pieces, sums, core = pieces_of(frame, K_Z, se, cluster="g")
        reference = ba.bias_aware([core], dset, 0.95)
        opt = ow.optimal_from_fit(pieces, sums, result, 0, core, dset, reference)
        ci = opt.interval.ci
        hits += ci.contains(BETA)
        lo, hi, _ = union_curve_set(core, dset, np.array([1.0]))
        to_union.append(ci.width / float(hi[-1] - lo[-1]))
        to_2sls.append(opt.length_ratio)
    return hits / reps, float(np.mean(to_union)), float(np.mean(to_2sls))


def _check_coverage(reps, se, seed):
    # common practice, no source: at the corner (+0.1 for every instrument, the worst case
    # for positive weights on these symmetric instruments) the interval should cover at about
    # the nominal rate (2 binomial SEs); mean lengths relative to the union and to the
    # 2SLS-centred interval are printed
    cover, union_ratio, tsls_ratio = _coverage(reps, se, seed)
    print(f"optimal bias-aware ({se}): coverage {cover:.4f} over {reps} reps; mean length / "
          f"union {union_ratio:.4f}; / 2SLS-centred {tsls_ratio:.4f}")
    assert abs(cover - 0.95) <= 2 * math.sqrt(0.95 * 0.05 / reps)
    assert union_ratio <= 1.0 and tsls_ratio <= 1.0


@pytest.mark.parametrize("se", ["robust", "cluster"])
def test_coverage_at_a_corner_fast(se):
    _check_coverage(400, se, seed=31)


@pytest.mark.slow
@pytest.mark.parametrize("se", ["robust", "cluster"])
def test_coverage_at_a_corner_4000_replications(se):
    _check_coverage(4000, se, seed=32)
