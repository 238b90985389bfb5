"""Correlation-restriction bounds (imperfect instruments) and the `sensiv corrbound` command.

Sources named beside each check:
* Nevo & Rosen (2012), "Identification with imperfect instruments": the assumption (same sign,
  ratio at most r̄) and the one-instrument bounds through V(λ) = σ_X Z − λ σ_Z X (from memory;
  the closed form used here is re-derived in ``sensiv.partial_id.correlation``);
* Imbens & Manski (2004): the interval covers the estimated identified set by construction;
* reference library: linearmodels ``IV2SLS`` (version in ``LM_VERSION``) for the 2SLS point
  at r̄ = 0;
* common practice, no source: brute-force grids, invariants (scaling, row order, weights as
  repeated rows), monotone widening, subset and intersection properties.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from sensiv.estimation import iv
from sensiv.cli.app import app
from sensiv.data import Spec
from sensiv.core.errors import InputError
from sensiv.partial_id.correlation import correlation_bounds
from sensiv.partial_id.correlation_bootstrap import replicate_moments, resample_rows
from sensiv.partial_id.correlation_moments import (PartialCorrelations, eliminate,
                                                   one_instrument_piece, partial_correlations)
from sensiv.partial_id.correlation_programme import compiled_programmes

linearmodels = pytest.importorskip("linearmodels")
from linearmodels.iv import IV2SLS  # noqa: E402

LM_VERSION = linearmodels.__version__
CLOSED_FORM_TOL = 1e-7  # issue contract: programme against closed form
REF_TOL = 1e-8          # issue contract: 2SLS against the reference library


# ------------------------------------------------------------------ data builders
def exact_sample(corr: np.ndarray, n: int, rng) -> np.ndarray:
    """Rows whose sample correlation matrix equals ``corr`` to rounding error."""
    raw = rng.normal(size=(n, corr.shape[0]))
    raw -= raw.mean(axis=0)
    whiten = np.linalg.cholesky(raw.T @ raw / n)
    unit = np.linalg.solve(whiten, raw.T).T
    return unit @ np.linalg.cholesky(corr).T


def frame_from_corr(corr: np.ndarray, n: int = 500, seed: int = 0, sd_y: float = 2.0,
                    sd_x: float = 0.5) -> pd.DataFrame:
    """Columns y, x, z1.. with exactly the given correlations (order y, x, z...)."""
    values = exact_sample(corr, n, np.random.default_rng(seed))
    frame = pd.DataFrame({"y": 3.0 + sd_y * values[:, 0], "x": -1.0 + sd_x * values[:, 1]})
    for j in range(2, corr.shape[0]):
        frame[f"z{j - 1}"] = values[:, j]
    return frame


def corr_yxz(xy: float, zy: list[float], zx: list[float], zz: float = 0.0) -> np.ndarray:
    k = len(zy)
    out = np.eye(2 + k)
    out[0, 1] = out[1, 0] = xy
    for j in range(k):
        out[0, 2 + j] = out[2 + j, 0] = zy[j]
        out[1, 2 + j] = out[2 + j, 1] = zx[j]
    for i in range(k):
        for j in range(k):
            if i != j:
                out[2 + i, 2 + j] = zz
    assert np.linalg.eigvalsh(out).min() > 0
    return out


def imperfect_iv(n: int, ratios: list[float], seed: int, beta: float = 1.5,
                 corr_xu: float = 0.5, corr_zx: tuple[float, ...] = (0.5, 0.4)) -> pd.DataFrame:
    """Nevo & Rosen (2012) design: corr(Z_k, u) = ratios[k]·corr(X, u), same sign.

    (Z..., X, u) are jointly normal with that correlation matrix, y = β X + u; a control w
    enters y, X and Z linearly and is independent of the rest, so the partial correlations
    given w are the designed ones.
    """
    k = len(ratios)
    corr = np.eye(k + 2)
    for j in range(k):
        corr[j, k] = corr[k, j] = corr_zx[j]
        corr[j, k + 1] = corr[k + 1, j] = ratios[j] * corr_xu
    corr[k, k + 1] = corr[k + 1, k] = corr_xu
    for i in range(k):
        for j in range(k):
            if i != j:
                corr[i, j] = 0.1
    assert np.linalg.eigvalsh(corr).min() > 0
    rng = np.random.default_rng(seed)
    draws = rng.normal(size=(n, k + 2)) @ np.linalg.cholesky(corr).T
    w = rng.normal(size=n)
    x = draws[:, k] + 0.5 * w
    frame = pd.DataFrame({"y": 1.0 + beta * x + draws[:, k + 1] + 0.7 * w, "x": x, "w": w})
    for j in range(k):
        frame[f"z{j + 1}"] = draws[:, j] + 0.3 * w
    return frame


def random_corr(rng, k: int) -> PartialCorrelations:
    a = rng.normal(size=(k + 2, k + 6))
    a[1] += rng.normal() * a[2]  # some instrument strength
    cov = a @ a.T
    sd = np.sqrt(np.diag(cov))
    c = cov / np.outer(sd, sd)
    return PartialCorrelations(float(c[0, 1]), c[2:, 0].copy(), c[2:, 1].copy(), 1.0)


def run(frame, instruments=("z1",), controls=(), **kw):
    kw.setdefault("reps", 0)
    kw.setdefault("points", 2)
    spec = Spec("y", ["x"], list(instruments), controls=list(controls),
                cluster=kw.pop("cluster", None), weight=kw.pop("weight", None))
    return correlation_bounds(frame, spec, **kw)


def close(a: float, b: float, tol: float) -> bool:
    if math.isinf(a) or math.isinf(b):
        return a == b
    return abs(a - b) <= tol * max(1.0, abs(a), abs(b))


def same_piece(p, q, tol: float) -> bool:
    if p is None or q is None:
        return p is None and q is None
    return close(p[0], q[0], tol) and close(p[1], q[1], tol)


def as_pair(interval):
    return None if interval is None else (interval.low, interval.high)


def contains(pieces, value: float) -> bool:
    return any(p.low <= value <= p.high for p in pieces)


# ------------------------------------------------------------------ Nevo & Rosen designs
@pytest.mark.parametrize("endogeneity", ["positive", "unknown"])
def test_true_beta_inside_for_ratio_at_least_true(endogeneity):
    # Nevo & Rosen (2012): the set under r̄ ≥ r (the true ratio) contains β; below r it
    # excludes β (at r the true β is the end β(V(r))).
    frame = imperfect_iv(200_000, [0.3], seed=1)
    wide = run(frame, ["z1"], ["w"], max_ratio=0.35, endogeneity=endogeneity)
    narrow = run(frame, ["z1"], ["w"], max_ratio=0.2, endogeneity=endogeneity)
    assert contains(wide.pieces, 1.5)
    assert not contains(narrow.pieces, 1.5)


def test_true_beta_inside_negative_endogeneity_two_instruments():
    # Nevo & Rosen (2012) with corr(X, u) < 0 and two instruments of true ratios 0.2, 0.35.
    frame = imperfect_iv(200_000, [0.2, 0.35], seed=2, corr_xu=-0.5)
    res = run(frame, ["z1", "z2"], ["w"], max_ratio=0.4, endogeneity="negative")
    assert contains(res.pieces, 1.5)
    assert run(frame, ["z1", "z2"], ["w"], max_ratio=1.0).identified_set.contains(1.5)
    assert not contains(run(frame, ["z1", "z2"], ["w"], max_ratio=0.25,
                            endogeneity="negative").pieces, 1.5)


# ------------------------------------------------------------------ programme vs closed forms
def test_one_instrument_programme_equals_closed_form():
    # Closed form: Nevo & Rosen (2012) V(λ) bounds, re-derived (module docstring); 1e-7.
    rng = np.random.default_rng(11)
    programmes = compiled_programmes(1)
    checked = {"empty": 0, "bounded": 0, "unbounded": 0}
    for j in range(90):
        pc = random_corr(rng, 1)
        programmes.load(pc)
        for ratio in ((0.0, 1.0)[j % 2], float(rng.uniform())):
            sign = int(rng.choice([1, -1]))
            lp = programmes.piece(sign, ratio)
            closed = as_pair(one_instrument_piece(pc.xy, float(pc.zy[0]), float(pc.zx[0]),
                                                  ratio, sign))
            assert same_piece(lp, closed, CLOSED_FORM_TOL), (pc, ratio, sign, lp, closed)
            kind = ("empty" if closed is None else
                    "bounded" if np.isfinite(closed).all() else "unbounded")
            checked[kind] += 1
    assert min(checked.values()) >= 10, checked  # every kind of outcome was exercised


@pytest.mark.parametrize("k", [1, 2, 3])
def test_elimination_equals_programme(k):
    # Exact one-variable elimination (used in the bootstrap) against the cvxpy programmes.
    rng = np.random.default_rng(20 + k)
    programmes = compiled_programmes(k)
    for _ in range(25):
        pc = random_corr(rng, k)
        programmes.load(pc)
        for sign in (1, -1):
            ratio = float(rng.uniform())
            assert same_piece(programmes.piece(sign, ratio), eliminate(pc, sign, ratio),
                              CLOSED_FORM_TOL)


def test_brute_force_grid_from_raw_covariances():
    # Common practice, no source: membership of β on a grid from the covariance form of the
    # conditions (σ_X·s·cov(Z,u) ≤ r̄·σ_Z·s·cov(X,u) etc.), with the control partialled out
    # by numpy least squares, agrees with the reported pieces.
    frame = imperfect_iv(3_000, [0.3, 0.1], seed=5)
    ratio = 0.45
    res = run(frame, ["z1", "z2"], ["w"], max_ratio=ratio)
    design = np.column_stack([np.ones(len(frame)), frame["w"]])
    resid = {c: frame[c] - design @ np.linalg.lstsq(design, frame[c], rcond=None)[0]
             for c in ("y", "x", "z1", "z2")}
    cov = {(a, b): float(np.mean(resid[a] * resid[b])) for a in resid for b in resid}
    sd = {c: math.sqrt(cov[c, c]) for c in resid}
    grid = np.linspace(-10, 10, 20_001)
    step = grid[1] - grid[0]
    hits = 0
    for beta in grid:
        inside = False
        for s in (1, -1):
            cov_xu = cov["x", "y"] - beta * cov["x", "x"]
            ok = s * cov_xu >= 0
            for z in ("z1", "z2"):
                cov_zu = cov[z, "y"] - beta * cov[z, "x"]
                ok &= s * cov_zu >= 0
                ok &= sd["x"] * s * cov_zu <= ratio * sd[z] * s * cov_xu
            inside |= bool(ok)
        near_end = any(min(abs(beta - p.low), abs(beta - p.high)) < step for p in res.pieces)
        if not near_end:
            assert inside == contains(res.pieces, beta), beta
        hits += inside
    assert hits > 100


# ------------------------------------------------------------------ invariants
def test_zero_ratio_collapses_to_2sls():
    # reference library: linearmodels IV2SLS (coefficient at 1e-8) and sensiv.estimation.iv.fit.
    frame = imperfect_iv(1_500, [0.3], seed=3)
    res = run(frame, ["z1"], ["w"], max_ratio=0.0)
    ref = IV2SLS(frame["y"], frame[["w"]].assign(const=1.0), frame[["x"]],
                 frame[["z1"]]).fit(cov_type="unadjusted")
    ours = iv.fit(frame, Spec("y", ["x"], ["z1"], controls=["w"])).tsls.value("x")
    lo, hi = res.identified_set.low, res.identified_set.high
    assert lo == pytest.approx(float(ref.params["x"]), rel=REF_TOL)
    assert hi == pytest.approx(float(ref.params["x"]), rel=REF_TOL)
    assert lo == pytest.approx(ours, rel=REF_TOL)
    assert res.tsls == pytest.approx(ours, rel=1e-12)
    assert res.min_ratio_consistent == 0.0


def test_sets_widen_monotonically_in_ratio():
    # Common practice, no source: the feasible set grows with r̄.
    frame = imperfect_iv(2_000, [0.3, 0.2], seed=4)
    res = run(frame, ["z1", "z2"], ["w"], max_ratio=1.0, points=21)
    tol = 1e-9
    for before, after in zip(res.curve, res.curve[1:]):
        for p in before.pieces:
            assert any(q.low - tol * max(1, abs(q.low)) <= p.low and
                       p.high <= q.high + tol * max(1, abs(q.high)) for q in after.pieces)
    widths = [p.hull.width for p in res.curve if p.hull is not None]
    assert widths[-1] > widths[0]


def test_known_sign_is_subset_of_unknown():
    # Common practice, no source: the unknown-sign set is the union of the two signed sets.
    frame = imperfect_iv(2_000, [0.4], seed=6)
    for ratio in (0.2, 0.7):
        both = run(frame, ["z1"], ["w"], max_ratio=ratio)
        pos = run(frame, ["z1"], ["w"], max_ratio=ratio, endogeneity="positive")
        neg = run(frame, ["z1"], ["w"], max_ratio=ratio, endogeneity="negative")
        for signed in (pos, neg):
            for p in signed.pieces:
                assert any(q.low <= p.low and p.high <= q.high for q in both.pieces)
        union = sorted([*pos.pieces, *neg.pieces], key=lambda p: p.low)
        assert [as_pair(p) for p in union] == [as_pair(p) for p in both.pieces]
    assert len(run(frame, ["z1"], ["w"], max_ratio=0.7).pieces) == 2  # disjoint pieces


def test_two_instruments_give_the_intersection():
    # Common practice, no source: each instrument adds its own constraints.
    frame = imperfect_iv(2_000, [0.3, 0.1], seed=7, corr_zx=(0.5, 0.6))
    for ratio in (0.35, 0.9):
        for endogeneity in ("positive", "negative"):
            joint = run(frame, ["z1", "z2"], ["w"], max_ratio=ratio, endogeneity=endogeneity)
            one = run(frame, ["z1"], ["w"], max_ratio=ratio, endogeneity=endogeneity)
            two = run(frame, ["z2"], ["w"], max_ratio=ratio, endogeneity=endogeneity)
            if one.empty or two.empty:
                assert joint.empty
                continue
            low = max(one.identified_set.low, two.identified_set.low)
            high = min(one.identified_set.high, two.identified_set.high)
            if low > high:
                assert joint.empty
            else:
                assert same_piece(as_pair(joint.identified_set), (low, high), 1e-8)


def test_controls_partialled_match_manual_residualising():
    # Common practice, no source (Frisch-Waugh-Lovell): residualise y, x, z on the constant,
    # a numeric and a text control by hand and drop the controls.
    frame = imperfect_iv(1_000, [0.3, 0.2], seed=8)
    rng = np.random.default_rng(8)
    frame["region"] = rng.choice(["north", "south", "east"], len(frame))
    frame["y"] += frame["region"].map({"north": 0.0, "south": 1.0, "east": -2.0})
    design = np.column_stack([np.ones(len(frame)), frame["w"],
                              frame["region"] == "north", frame["region"] == "south"])
    by_hand = pd.DataFrame({c: frame[c] - design @ np.linalg.lstsq(design, frame[c],
                                                                     rcond=None)[0]
                            for c in ("y", "x", "z1", "z2")})
    ours = run(frame, ["z1", "z2"], ["w", "region"], max_ratio=0.6, points=4)
    manual = run(by_hand, ["z1", "z2"], [], max_ratio=0.6, points=4)
    for a, b in zip(ours.curve, manual.curve):
        assert len(a.pieces) == len(b.pieces)
        for p, q in zip(a.pieces, b.pieces):
            assert same_piece(as_pair(p), as_pair(q), 1e-9)


def test_scaling_and_row_order():
    # Common practice, no source: y → c·y scales every bound by c; row order is irrelevant.
    frame = imperfect_iv(1_000, [0.3], seed=9)
    base = run(frame, ["z1"], ["w"], max_ratio=0.3, threshold=1.0)
    scaled = run(frame.assign(y=2.5 * frame["y"]), ["z1"], ["w"], max_ratio=0.3,
                 threshold=2.5)
    shuffled = run(frame.sample(frac=1.0, random_state=1), ["z1"], ["w"], max_ratio=0.3,
                   threshold=1.0)
    for p, q, r in zip(base.pieces, scaled.pieces, shuffled.pieces):
        assert same_piece((2.5 * p.low, 2.5 * p.high), as_pair(q), 1e-9)
        assert same_piece(as_pair(p), as_pair(r), 1e-9)
    assert scaled.breakdown_ratio == pytest.approx(base.breakdown_ratio, rel=1e-9)


def test_integer_weights_equal_repeated_rows():
    # Common practice, no source: analytic weight k equals the row repeated k times.
    frame = imperfect_iv(600, [0.3], seed=10)
    frame["wt"] = np.random.default_rng(10).integers(1, 4, len(frame))
    repeated = frame.loc[frame.index.repeat(frame["wt"])]
    weighted = run(frame, ["z1"], ["w"], max_ratio=0.3, weight="wt")
    plain = run(repeated, ["z1"], ["w"], max_ratio=0.3)
    assert same_piece(as_pair(weighted.identified_set), as_pair(plain.identified_set), 1e-9)


# ------------------------------------------------------------------ empty and unbounded sets
def test_empty_set_reports_min_ratio_one_instrument():
    # Closed form (derivation in the module): with corr(X,u) > 0 built in (OLS > 2SLS) and
    # a positive first stage, the "negative" piece is non-empty iff r̄ > corr(Z, X).
    corr = corr_yxz(0.6, [0.2], [0.5])  # 2SLS (std) 0.4 < OLS (std) 0.6
    frame = frame_from_corr(corr)
    res = run(frame, max_ratio=0.3, endogeneity="negative")
    assert res.empty and res.identified_set is None
    assert res.min_ratio_consistent == pytest.approx(0.5, abs=CLOSED_FORM_TOL)
    assert any("empty" in note for note in res.notes)
    m = res.min_ratio_consistent
    assert not run(frame, max_ratio=m - 1e-6, endogeneity="negative").pieces
    above = run(frame, max_ratio=m + 1e-6, endogeneity="negative")
    # Just past the pole λ = corr(Z, X) the piece is a half-line [β(r̄), +∞) far above OLS.
    assert above.pieces and math.isinf(above.pieces[0].high)
    assert above.pieces[0].low > 1e4 * abs(res.ols)
    doc = res.to_dict()
    assert doc["identified_set"] is None and doc["empty"] is True and doc["ci"] is None


def test_min_ratio_two_instruments_against_grid():
    # Common practice, no source: min over a fine β grid of max_k G_k(β)/E(β) matches the
    # exact Charnes-Cooper value; the set is empty just below it and non-empty above.
    corr = corr_yxz(0.55, [0.2, 0.1], [0.5, 0.45], zz=0.2)
    frame = frame_from_corr(corr)
    res = run(frame, ["z1", "z2"], max_ratio=0.0, endogeneity="positive")
    m = res.min_ratio_consistent
    assert res.empty and 0 < m < 1
    b = np.linspace(-3, 0.55 - 1e-9, 400_001)  # β in standardised units, s(ρ_xy − b) > 0
    e = 0.55 - b
    g = np.stack([0.2 - b * 0.5, 0.1 - b * 0.45])
    ok = (g >= 0).all(axis=0)
    grid_min = float(np.min(np.max(g[:, ok] / e[ok], axis=0)))
    assert m == pytest.approx(grid_min, abs=1e-5)
    assert run(frame, ["z1", "z2"], max_ratio=m - 1e-6, endogeneity="positive").empty
    assert not run(frame, ["z1", "z2"], max_ratio=m + 1e-6, endogeneity="positive").empty


def test_min_ratio_attained_only_at_infinity():
    # Module derivation: when the first 2SLS estimate lies above OLS under positive
    # endogeneity, every ratio G_k/E increases in β and tends to ρ_{z_k x} as β → −∞, so the
    # smallest consistent r̄ is max_k ρ_{z_k x} = 0.5, approached by unbounded sets.
    frame = frame_from_corr(corr_yxz(0.55, [0.35, 0.1], [0.5, 0.45], zz=0.2))
    res = run(frame, ["z1", "z2"], max_ratio=0.0, endogeneity="positive")
    assert res.min_ratio_consistent == pytest.approx(0.5, abs=CLOSED_FORM_TOL)
    above = run(frame, ["z1", "z2"], max_ratio=0.5 + 1e-6, endogeneity="positive")
    assert above.identified_set.low == -math.inf
    assert run(frame, ["z1", "z2"], max_ratio=0.5 - 1e-6, endogeneity="positive").empty


def test_min_ratio_null_when_even_one_is_empty():
    # Closed form (module derivation): positive endogeneity with a negative first stage and
    # 2SLS above OLS leaves no admissible λ for any r̄ ≤ 1.
    frame = frame_from_corr(corr_yxz(0.3, [-0.3], [-0.3]))
    res = run(frame, max_ratio=1.0, endogeneity="positive")
    assert res.empty and res.min_ratio_consistent is None
    assert res.to_dict()["min_ratio_consistent"] is None
    assert run(frame, max_ratio=1.0).min_ratio_consistent == 0.0  # the other sign fits


def test_unbounded_end_is_inf_and_json_null():
    # Closed form (module derivation): the pole λ = corr(Z, X) inside [0, r̄] gives a half-line.
    corr = corr_yxz(0.6, [0.2], [0.5])
    frame = frame_from_corr(corr)
    res = run(frame, max_ratio=0.8, endogeneity="positive")
    assert res.identified_set.low == -math.inf
    closed = one_instrument_piece(0.6, 0.2, 0.5, 0.8, 1)
    scale = 2.0 / 0.5  # sd_y / sd_x of frame_from_corr
    assert res.identified_set.high == pytest.approx(closed.high * scale, rel=CLOSED_FORM_TOL)
    doc = res.to_dict()
    assert doc["identified_set"][0] is None
    assert doc["curve"][-1]["lower"] is None


# ------------------------------------------------------------------ breakdown
def test_breakdown_is_exact_one_instrument():
    # Closed form: θ = β(λ) solved for λ, λ = (ρ_zy − θ ρ_zx)/(ρ_xy − θ) in standardised units.
    frame = frame_from_corr(corr_yxz(0.6, [0.3], [0.5]))
    scale = 2.0 / 0.5
    theta = 0.2 * scale
    res = run(frame, max_ratio=1.0, threshold=theta, endogeneity="positive")
    expected = (0.3 - 0.2 * 0.5) / (0.6 - 0.2)
    assert res.breakdown_ratio == pytest.approx(expected, abs=CLOSED_FORM_TOL)
    k = res.breakdown_ratio
    assert contains(run(frame, max_ratio=k + 1e-9, endogeneity="positive").pieces, theta)
    assert not contains(run(frame, max_ratio=k - 1e-6, endogeneity="positive").pieces, theta)


def test_breakdown_two_instruments_and_null():
    # Common practice, no source: bracketing by the programmes just below / above.
    frame = imperfect_iv(3_000, [0.3, 0.2], seed=12)
    res = run(frame, ["z1", "z2"], ["w"], max_ratio=1.0, threshold=0.0)
    k = res.breakdown_ratio
    assert k is not None and 0 < k < 1
    assert contains(run(frame, ["z1", "z2"], ["w"], max_ratio=min(k + 1e-9, 1.0)).pieces, 0.0)
    assert not contains(run(frame, ["z1", "z2"], ["w"], max_ratio=k - 1e-6).pieces, 0.0)
    # A threshold on the wrong side of OLS under a known sign is never reached.
    never = run(frame, ["z1", "z2"], ["w"], max_ratio=1.0, threshold=res.ols + 1.0,
                endogeneity="positive")
    assert never.breakdown_ratio is None
    assert never.to_dict()["breakdown_ratio"] is None


# ------------------------------------------------------------------ bootstrap
def test_bootstrap_deterministic_and_covers_set():
    # Imbens & Manski (2004): the interval contains the estimated set; seeds reproduce.
    frame = imperfect_iv(1_500, [0.3], seed=13)
    frame["g"] = np.random.default_rng(0).integers(0, 60, len(frame))
    for cluster in (None, "g"):
        a = run(frame, ["z1"], ["w"], max_ratio=0.3, reps=60, seed=5, cluster=cluster)
        b = run(frame, ["z1"], ["w"], max_ratio=0.3, reps=60, seed=5, cluster=cluster)
        c = run(frame, ["z1"], ["w"], max_ratio=0.3, reps=60, seed=6, cluster=cluster)
        assert a.bootstrap == b.bootstrap
        assert a.bootstrap.se_lower != c.bootstrap.se_lower
        assert a.bootstrap.n_used == 60 and a.bootstrap.se_lower > 0
        assert a.ci.low < a.identified_set.low <= a.identified_set.high < a.ci.high
        assert (a.bootstrap.clusters == 60) == (cluster == "g")
    doc = a.to_dict()
    assert doc["ci"] == a.ci.to_list() and doc["n_failed_reps"] == 0


def test_cluster_bootstrap_ignores_row_order():
    # Common practice, no source: clusters are coded by their sorted keys, so permuting the rows
    # (and so the order in which clusters first appear) leaves a seeded interval unchanged.
    frame = imperfect_iv(900, [0.3], seed=21)
    rng = np.random.default_rng(4)
    frame["g"] = np.array([f"village-{i:02d}" for i in rng.integers(0, 40, len(frame))])
    shuffled = frame.sample(frac=1.0, random_state=11).reset_index(drop=True)
    a = run(frame, ["z1"], ["w"], max_ratio=0.3, reps=40, seed=8, cluster="g")
    b = run(shuffled, ["z1"], ["w"], max_ratio=0.3, reps=40, seed=8, cluster="g")
    assert a.bootstrap.clusters == b.bootstrap.clusters == 40
    for x, y in ((a.bootstrap.se_lower, b.bootstrap.se_lower),
                 (a.bootstrap.se_upper, b.bootstrap.se_upper),
                 (a.ci.low, b.ci.low), (a.ci.high, b.ci.high)):
        assert close(x, y, 1e-9), (x, y)  # equal up to the order of floating-point sums


def test_bootstrap_counts_unbounded_replicates():
    # Common practice, no source: near the pole some replicates become unbounded; they are
    # counted and left out.
    frame = frame_from_corr(corr_yxz(0.6, [0.15], [0.3]), n=300)  # pole at r̄ = 0.3
    res = run(frame, max_ratio=0.29, endogeneity="positive", reps=80, seed=1)
    boot = res.bootstrap
    assert boot.n_unbounded > 0
    assert boot.n_used + boot.n_unbounded + boot.n_empty + boot.n_degenerate == 80
    assert any("left out" in note for note in res.notes)


def test_bootstrap_replicates_elimination_matches_programme():
    # The bootstrap's elimination kernel against the cvxpy programmes on real replicates.
    frame = imperfect_iv(800, [0.3, 0.2], seed=14)
    spec = Spec("y", ["x"], ["z1", "z2"], controls=["w"])
    from sensiv.data import from_frame

    source = from_frame(frame, spec)
    rows = resample_rows(list(source.chunks()), None)
    programmes = compiled_programmes(2)
    replicates = replicate_moments(*rows, source.layout.columns, 15, 99)
    for moments in replicates:
        pc = partial_correlations(moments, source.layout)
        programmes.load(pc)
        for sign in (1, -1):
            assert same_piece(programmes.piece(sign, 0.5), eliminate(pc, sign, 0.5),
                              CLOSED_FORM_TOL)


# ------------------------------------------------------------------ bad input (Python API)
@pytest.mark.parametrize("kwargs, fragments", [
    ({"max_ratio": 1.5}, ["--max-ratio", "1.5", "[0, 1]"]),
    ({"max_ratio": -0.1}, ["--max-ratio", "[0, 1]"]),
    ({"endogeneity": "sideways"}, ["sideways", "positive, negative, unknown"]),
    ({"points": 1}, ["--points", "at least 2"]),
    ({"reps": -1}, ["--reps", "positive integer"]),
    ({"seed": -3}, ["--seed", "-3"]),
    ({"threshold": math.inf}, ["--threshold", "finite"]),
    ({"confidence_level": 1.0}, ["--level", "(0, 1)"]),
])
def test_bad_options_raise_input_error(kwargs, fragments):
    frame = imperfect_iv(200, [0.3], seed=0)
    with pytest.raises(InputError) as info:
        run(frame, **kwargs)
    for fragment in fragments:
        assert fragment in str(info.value)


def test_several_treatments_raise():
    frame = imperfect_iv(200, [0.3, 0.1], seed=0)
    with pytest.raises(InputError, match="exactly one treatment; got 2"):
        correlation_bounds(frame, Spec("y", ["x", "w"], ["z1", "z2"]), reps=0)


# ------------------------------------------------------------------ command line
runner = CliRunner()
CONTRACT = ("identified_set", "ci", "curve", "breakdown_ratio", "min_ratio_consistent")


@pytest.fixture(scope="module")
def data(tmp_path_factory):
    frame = imperfect_iv(800, [0.3, 0.2], seed=15)
    frame["g"] = np.random.default_rng(1).integers(0, 30, len(frame))
    path = tmp_path_factory.mktemp("corr") / "d.csv"
    frame.to_csv(path, index=False)
    return path


BASE = ("--outcome", "y", "--treatment", "x", "--instrument", "z1", "--control", "w")
FAST = ("--reps", "30", "--seed", "1", "--points", "5")


def invoke(*args):
    return runner.invoke(app, [str(a) for a in args])


def test_cli_json_contract(data):
    result = invoke("corrbound", data, *BASE, *FAST, "--max-ratio", "0.3", "--json")
    assert result.exit_code == 0, result.stderr
    doc = json.loads(result.stdout)
    for key in CONTRACT:
        assert key in doc
    assert len(doc["identified_set"]) == 2 and len(doc["ci"]) == 2
    assert [set(p) >= {"max_ratio", "lower", "upper"} for p in doc["curve"]] == [True] * 5
    assert doc["curve"][-1]["max_ratio"] == 0.3
    assert doc["min_ratio_consistent"] == 0.0
    assert doc["assumptions"] and "do not prove" in doc["caution"]


def test_cli_json_stdout_clean_at_descriptor_level(data):
    # HiGHS prints a banner on file descriptor 1 once per process: a fresh process shows
    # whether it leaks into --json output.
    command = [sys.executable, "-c", "from sensiv.cli import main; main()", "corrbound",
               str(data), *BASE, "--instrument", "z2", "--cluster", "g", *FAST, "--max-ratio",
               "0.3", "--json"]
    done = subprocess.run(command, capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    doc = json.loads(done.stdout)
    assert doc["bootstrap"]["resampled"] == "clusters"
    assert "HiGHS" not in done.stdout


def test_cli_text_and_out_dir(data, tmp_path):
    out = tmp_path / "cb"
    result = invoke("corrbound", data, *BASE, *FAST, "--endogeneity", "positive", "--out", out)
    assert result.exit_code == 0, result.stderr
    assert "Identified set" in result.stdout and "Caution" in result.stdout
    assert {p.name for p in out.iterdir()} == {
        "corrbound.json", "corrbound.md", "corrbound-table.md", "corrbound-table.tex",
        "corrbound-table.csv", "corrbound-table.json", "corrbound-curve.png",
        ".sensiv-bundle"}  # the marker of a bundle sensiv wrote whole
    doc = json.loads((out / "corrbound.json").read_text())
    assert doc["endogeneity"] == "positive"
    md = (out / "corrbound.md").read_text()
    assert "## Assumptions" in md and "| r̄ | lower | upper | pieces |" in md


def test_cli_empty_set_is_a_finding(tmp_path):
    path = tmp_path / "e.csv"
    frame_from_corr(corr_yxz(0.6, [0.2], [0.5])).to_csv(path, index=False)
    result = invoke("corrbound", path, "--outcome", "y", "--treatment", "x", "--instrument",
                    "z1", "--endogeneity", "negative", "--max-ratio", "0.3", *FAST, "--json")
    assert result.exit_code == 0, result.stderr
    doc = json.loads(result.stdout)
    assert doc["identified_set"] is None and doc["ci"] is None
    assert doc["min_ratio_consistent"] == pytest.approx(0.5, abs=CLOSED_FORM_TOL)


def bad(result, *fragments):
    assert result.exit_code == 2, (result.exit_code, result.stdout, result.stderr)
    assert "Traceback" not in result.stderr and result.stdout == ""
    for fragment in fragments:
        assert fragment.lower() in result.stderr.lower(), result.stderr


@pytest.mark.parametrize("extra, fragments", [
    (("--max-ratio", "1.5"), ["--max-ratio", "[0, 1]"]),
    (("--max-ratio", "-0.2"), ["--max-ratio", "[0, 1]"]),
    (("--endogeneity", "sideways"), ["sideways", "positive"]),
    (("--reps", "0"), ["--reps", "positive integer"]),
    (("--points", "1"), ["--points"]),
    (("--cluster", "nope"), ["'nope'", "not found"]),
])
def test_cli_bad_input_exits_2(data, extra, fragments):
    bad(invoke("corrbound", data, *BASE, *FAST, *extra), *fragments)


def test_cli_several_treatments_exit_2(data):
    bad(invoke("corrbound", data, "--outcome", "y", "--treatment", "x", "--treatment", "w",
               "--instrument", "z1", "--instrument", "z2", *FAST),
        "exactly one treatment", "x, w")
