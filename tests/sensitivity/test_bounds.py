"""Direct-effect sensitivity against brute force and published formulas.

Sources beside each check:
* reference library: linearmodels ``IV2SLS`` refitted on ``y − Zγ`` (brute force);
* Conley, Hansen & Rossi (2012): union of confidence intervals over a set of direct effects,
  and the local-to-zero prior interval ``β̂ − Aμ ± z√(V + AΩA')``;
* common practice, no source: invariances and Monte Carlo coverage.
"""

from __future__ import annotations

import itertools
import math
import warnings

import numpy as np
import pandas as pd
import pytest

from sensiv.sensitivity import bounds, prior
from sensiv.sensitivity.direct_sets import box_set
from sensiv.sensitivity.linear_core import build_core, focus_block
from sensiv.sensitivity.prior_laws import parse_prior
from sensiv.sensitivity.union import union_interval
from sensiv.data import Spec, from_frame
from sensiv.core.errors import InputError, WeakInstrumentWarning

from linearmodels.iv import IV2SLS  # noqa: E402  (reference library, test extra)

REL = 1e-8
COV = {"classic": "unadjusted", "robust": "robust", "cluster": "clustered"}


def design(n=500, seed=3, k_z=1, gamma=None, strength=0.8):
    rng = np.random.default_rng(seed)
    z = rng.normal(size=(n, k_z))
    w = rng.normal(size=n)
    g = rng.integers(0, 25, n)
    v = rng.normal(size=n)
    x = z @ np.full(k_z, strength) + 0.5 * w + v
    gamma = np.zeros(k_z) if gamma is None else np.asarray(gamma)
    u = 0.6 * v + rng.normal(size=n) * (1 + 0.5 * np.abs(z[:, 0]))
    y = 1.0 + 0.5 * x + 0.3 * w + z @ gamma + u
    frame = pd.DataFrame({"y": y, "x": x, "w": w, "g": g})
    for k in range(k_z):
        frame[f"z{k + 1}"] = z[:, k]
    return frame


def spec_for(k_z, cluster=None):
    return Spec(outcome="y", treatments=("x",), instruments=tuple(f"z{k + 1}" for k in range(k_z)),
                controls=("w",), cluster=cluster)


def refit(frame, gamma, se, cluster=None):
    """Brute force: the reference library's 2SLS of y − Zγ (reference library: linearmodels)."""
    inst = [c for c in frame.columns if c.startswith("z")]
    y = frame["y"] - frame[inst].to_numpy() @ np.asarray(gamma, float)
    kwargs = {"cov_type": COV[se], "debiased": False}
    if se == "cluster":
        kwargs["clusters"] = frame[cluster]
    res = IV2SLS(y, frame[["w"]].assign(const=1.0), frame[["x"]], frame[inst]).fit(**kwargs)
    return float(res.params["x"]), float(res.std_errors["x"])


def run_sweep(frame, k_z, ranges, se="robust", threshold=0.0, points=11, cluster=None):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        return bounds.sweep(from_frame(frame, spec_for(k_z, cluster)), direct=ranges, se=se,
                            threshold=threshold, points=points)


def core_of(frame, k_z, se, cluster=None):
    from sensiv.estimation import iv

    source = from_frame(frame, spec_for(k_z, cluster))
    result, pieces, sums = iv.fit_with_pieces(
        source, se=se, confidence_level=0.95, small=False,
        extra_blocks=lambda p: [] if se == "classic" else [focus_block(p, 0)])
    return build_core(pieces, sums, result, 0)


@pytest.mark.parametrize("se", ["classic", "robust", "cluster"])
@pytest.mark.parametrize("k_z", [1, 2])
def test_beta_and_se_at_any_gamma_match_refits(se, k_z):
    # reference library: linearmodels IV2SLS refitted on y − Zγ, relative 1e-8
    frame = design(k_z=k_z)
    cluster = "g" if se == "cluster" else None
    core = core_of(frame, k_z, se, cluster)
    rng = np.random.default_rng(0)
    for gamma in rng.normal(scale=0.3, size=(4, k_z)):
        b, s = refit(frame, gamma, se, cluster)
        assert float(core.beta(gamma)[0]) == pytest.approx(b, rel=REL)
        assert math.sqrt(float(core.variance(gamma)[0])) == pytest.approx(s, rel=REL)


@pytest.mark.parametrize("se", ["robust", "cluster"])
def test_union_interval_is_the_exact_envelope_of_refits(se):
    # reference library (brute force over a grid that contains the box corners): every refitted
    # interval lies inside the union, and the union's ends are attained (1e-8).
    frame = design(k_z=2)
    cluster = "g" if se == "cluster" else None
    res = run_sweep(frame, 2, ["-0.1:0.05", "-0.02:0.08"], se=se, cluster=cluster)
    grid = itertools.product(np.linspace(-0.1, 0.05, 7), np.linspace(-0.02, 0.08, 7))
    lows, highs = [], []
    for gamma in grid:
        b, s = refit(frame, gamma, se, cluster)
        lows.append(b - 1.959963984540054 * s)
        highs.append(b + 1.959963984540054 * s)
    assert res.union_ci.low <= min(lows) + 1e-12
    assert res.union_ci.high >= max(highs) - 1e-12
    assert res.union_ci.low == pytest.approx(min(lows), rel=REL)
    assert res.union_ci.high == pytest.approx(max(highs), rel=REL)


def test_identified_set_box_closed_form():
    # common practice, no source: β̂ − a'γ over a box is extremal at a corner; here checked
    # against brute-force refits at the corners (reference library: linearmodels)
    frame = design(k_z=2)
    res = run_sweep(frame, 2, ["-0.1:0.05", "-0.02:0.08"])
    betas = [refit(frame, g, "robust")[0]
             for g in itertools.product((-0.1, 0.05), (-0.02, 0.08))]
    assert res.identified_set.low == pytest.approx(min(betas), rel=REL)
    assert res.identified_set.high == pytest.approx(max(betas), rel=REL)


def test_zero_set_gives_the_ordinary_interval():
    # Conley, Hansen & Rossi (2012): with Γ = {0} the union interval is the 2SLS interval
    frame = design()
    res = run_sweep(frame, 1, ["0:0"])
    ci = res.fit.conf_int("x")
    assert res.union_ci.low == pytest.approx(ci.low, rel=1e-12)
    assert res.union_ci.high == pytest.approx(ci.high, rel=1e-12)
    assert res.identified_set.low == res.identified_set.high == pytest.approx(res.estimate)


@pytest.mark.parametrize("se", ["classic", "robust", "cluster"])
def test_breakdown_scale_touches_the_threshold(se):
    # reference library: at the reported breakdown scale t*, the refitted interval at one of
    # the scaled corners touches the threshold (1e-8 of the SE)
    frame = design(k_z=2)
    cluster = "g" if se == "cluster" else None
    res = run_sweep(frame, 2, ["-0.05:0.05", "-0.05:0.05"], se=se, threshold=0.2,
                    cluster=cluster)
    t = res.breakdown.scale
    assert t is not None and t > 0
    gaps = []
    for corner in itertools.product((-0.05, 0.05), (-0.05, 0.05)):
        b, s = refit(frame, t * np.array(corner), se, cluster)
        gaps.append(min(abs(b - 1.959963984540054 * s - 0.2), abs(b + 1.959963984540054 * s
                                                                   - 0.2)) / s)
    assert min(gaps) < 1e-8
    # just below t* the union interval is clear of the threshold; just above, it is not
    core = core_of(frame, 2, se, cluster)
    verts = box_set(("z1", "z2"), [(-0.05, 0.05), (-0.05, 0.05)]).vertices
    below = union_interval(core, verts, t * (1 - 1e-6))
    above = union_interval(core, verts, t * (1 + 1e-6))
    assert not below.contains(0.2) and above.contains(0.2)


def test_direct_breakdown_roots_touch_the_threshold():
    # reference library: at each per-instrument root the refitted interval reaches θ₀
    frame = design(k_z=2)
    res = run_sweep(frame, 2, ["-0.05:0.05", "-0.05:0.05"], threshold=0.3)
    for k in range(2):
        for root in (res.breakdown.direct_lower[k], res.breakdown.direct_upper[k]):
            if root is None:
                continue
            gamma = np.zeros(2)
            gamma[k] = root
            b, s = refit(frame, gamma, "robust")
            ends = (b - 1.959963984540054 * s, b + 1.959963984540054 * s)
            assert min(abs(e - 0.3) for e in ends) / s < 1e-8
    assert any(r is not None for r in res.breakdown.direct_lower + res.breakdown.direct_upper)


def test_breakdown_never_and_zero():
    frame = design(strength=2.0)
    far = run_sweep(frame, 1, ["-0.0001:0.0001"], threshold=-1e6)
    assert far.breakdown.scale is None  # never within 1000 scalings
    assert far.to_dict()["breakdown"]["scale"] is None
    inside = run_sweep(frame, 1, ["-0.01:0.01"], threshold=far.estimate)
    assert inside.breakdown.scale == 0.0
    assert inside.breakdown.conclusion.startswith("none")


def test_curve_widens_monotonically_and_ends_at_the_union():
    # common practice, no source: the union interval and identified set grow with the scale
    res = run_sweep(design(k_z=2), 2, ["-0.1:0.05", "-0.02:0.08"], points=51)
    c = res.curve
    assert np.all(np.diff(c.lower) <= 1e-15) and np.all(np.diff(c.upper) >= -1e-15)
    assert np.all(np.diff(c.id_lower) <= 1e-15) and np.all(np.diff(c.id_upper) >= -1e-15)
    assert c.lower[-1] == pytest.approx(res.union_ci.low)
    assert c.upper[-1] == pytest.approx(res.union_ci.high)
    assert np.all(c.lower <= c.id_lower) and np.all(c.upper >= c.id_upper)


def test_scaling_the_outcome_scales_every_bound():
    # common practice, no source: y → c·y with Γ → c·Γ scales every bound by c
    frame = design(k_z=1)
    a = run_sweep(frame, 1, ["-0.05:0.1"], threshold=0.1)
    b = run_sweep(frame.assign(y=frame["y"] * 40.0), 1, ["-2:4"], threshold=4.0)
    for x, y in ((a.union_ci, b.union_ci), (a.identified_set, b.identified_set)):
        assert y.low == pytest.approx(40.0 * x.low, rel=1e-10)
        assert y.high == pytest.approx(40.0 * x.high, rel=1e-10)
    assert b.breakdown.scale == pytest.approx(a.breakdown.scale, rel=1e-10)
    assert [p.low for p in b.ar_set] == pytest.approx([40 * p.low for p in a.ar_set], rel=1e-9)


def test_permuting_rows_changes_nothing():
    frame = design(k_z=2)
    a = run_sweep(frame, 2, ["-0.1:0.05", "-0.02:0.08"], se="cluster", cluster="g")
    b = run_sweep(frame.sample(frac=1, random_state=1), 2, ["-0.1:0.05", "-0.02:0.08"],
                  se="cluster", cluster="g")
    assert a.union_ci.low == pytest.approx(b.union_ci.low, rel=1e-10)
    assert a.breakdown.scale == pytest.approx(b.breakdown.scale, rel=1e-10)


def test_units_reduced_form_and_sd():
    # the 'rf' range is a share of the reduced-form coefficient, 'sd' is in outcome SDs per
    # instrument SD (definitions of this package; reduced form from the reference library)
    frame = design()
    res = run_sweep(frame, 1, ["-0.2:0.1rf"])
    rf = IV2SLS(frame["y"], frame[["z1", "w"]].assign(const=1.0), None, None).fit().params["z1"]
    lo, hi = sorted((-0.2 * rf, 0.1 * rf))
    assert res.direct_set[0].low == pytest.approx(lo, rel=1e-10)
    assert res.direct_set[0].high == pytest.approx(hi, rel=1e-10)
    assert res.direct_set_rf[0].low == pytest.approx(-0.2 if rf > 0 else -0.1, rel=1e-10)
    sd = run_sweep(frame, 1, ["-0.1:0.1sd"])
    scale = frame["y"].std(ddof=0) / frame["z1"].std(ddof=0)
    assert sd.direct_set[0].high == pytest.approx(0.1 * scale, rel=1e-10)
    assert sd.direct_set_sd[0].high == pytest.approx(0.1, rel=1e-10)


def test_polytope_matches_box_and_lp(tmp_path):
    frame = design(k_z=2)
    box = run_sweep(frame, 2, ["-0.1:0.05", "-0.02:0.08"])
    path = tmp_path / "poly.csv"
    pd.DataFrame({"z1": [1, -1, 0, 0], "z2": [0, 0, 1, -1],
                  "bound": [0.05, 0.1, 0.08, 0.02]}).to_csv(path, index=False)
    poly = bounds.sweep(from_frame(frame, spec_for(2)), polytope=str(path), points=11)
    assert poly.polytope
    assert poly.identified_set.low == pytest.approx(box.identified_set.low, rel=1e-7)
    assert poly.union_ci.low == pytest.approx(box.union_ci.low, rel=1e-12)
    assert poly.breakdown.scale == pytest.approx(box.breakdown.scale, rel=1e-12)
    # a triangle: γ1 + γ2 ≤ 0.05, γ1 ≥ −0.05, γ2 ≥ −0.05 — LP vs vertices
    pd.DataFrame({"z1": [1, -1, 0], "z2": [1, 0, -1], "bound": [0.05, 0.05, 0.05]}).to_csv(
        path, index=False)
    tri = bounds.sweep(from_frame(frame, spec_for(2)), polytope=str(path), points=5)
    assert tri.identified_set.low == pytest.approx(tri.curve.id_lower[-1], rel=1e-7)
    assert tri.identified_set.high == pytest.approx(tri.curve.id_upper[-1], rel=1e-7)


@pytest.mark.parametrize("rows,message", [
    ({"z1": [1, -1], "z2": [0, 0], "bound": [0.1, 0.1]}, "unbounded"),
    ({"z1": [1, -1, 0, 0], "z2": [0, 0, 1, -1], "bound": [-0.1, -0.1, 0.1, 0.1]}, "empty"),
    ({"z1": [], "z2": [], "bound": []}, "no rows"),
])
def test_bad_polytopes(tmp_path, rows, message):
    path = tmp_path / "p.csv"
    pd.DataFrame(rows).to_csv(path, index=False)
    with pytest.raises(InputError, match=message):
        bounds.sweep(from_frame(design(k_z=2), spec_for(2)), polytope=str(path))


@pytest.mark.parametrize("ranges,message", [
    (["0.1:-0.1"], "exceeds"),
    (["-0.1:0.1", "0:1"], "instrument"),
    (["-0.1:0.1pct"], "unit"),
    (["a:b"], "not a range"),
])
def test_bad_ranges(ranges, message):
    with pytest.raises(InputError, match=message):
        bounds.sweep(from_frame(design(), spec_for(1)), direct=ranges)


def test_focus_must_be_a_treatment():
    with pytest.raises(InputError, match="--focus 'w'"):
        bounds.sweep(from_frame(design(), spec_for(1)), direct=["0:0"], focus="w")


# ------------------------------------------------------------------ weak-IV-robust set
def _ar_min(frame, k_z, beta0, box, se="robust"):
    """Brute force: min over a grid of γ in the box of the AR statistic refitted with the
    reference library (regress y − β₀x − Zγ on instruments and controls; Wald test)."""
    inst = [f"z{k + 1}" for k in range(k_z)]
    exog = frame[[*inst, "w"]].assign(const=1.0)
    best = math.inf
    for gamma in itertools.product(*[np.linspace(lo, hi, 41) for lo, hi in box]):
        y = frame["y"] - beta0 * frame["x"] - frame[inst].to_numpy() @ np.array(gamma)
        res = IV2SLS(y, exog, None, None).fit(cov_type=COV[se], debiased=False)
        best = min(best, res.wald_test(formula=" = ".join(inst) + " = 0").stat)
    return best


def test_robust_set_one_instrument_exact():
    # reference library: at each end of the exact set, min over γ of the refitted AR statistic
    # equals the chi-square(1) critical value (grid over γ includes the minimiser's region)
    from scipy import stats

    frame = design(strength=0.25, seed=9)
    res = run_sweep(frame, 1, ["-0.05:0.05"])
    assert res.ar_method == "exact"
    crit = stats.chi2.ppf(0.95, 1)
    for piece in res.ar_set:
        for end in (piece.low, piece.high):
            if math.isfinite(end):
                assert _ar_min(frame, 1, end, [(-0.05, 0.05)]) == pytest.approx(crit, rel=1e-6)


def _ar_min_rows(frame, k_z, beta0, box):
    """Brute force from the rows with numpy (no moments): the heteroskedasticity-robust AR
    statistic of y − β₀x − Zγ on [Z, W, 1], minimised over γ in the box from several starts."""
    from scipy.optimize import minimize

    inst = [f"z{k + 1}" for k in range(k_z)]
    q = np.column_stack([frame[inst].to_numpy(), frame["w"], np.ones(len(frame))])
    zmat = frame[inst].to_numpy()
    base = (frame["y"] - beta0 * frame["x"]).to_numpy()
    qq_inv = np.linalg.inv(q.T @ q)

    def stat(gamma):
        r = base - zmat @ gamma
        coef = qq_inv @ (q.T @ r)
        e = r - q @ coef
        meat = (q * e[:, None] ** 2).T @ q
        cov = qq_inv @ meat @ qq_inv
        c = coef[:k_z]
        return float(c @ np.linalg.solve(cov[:k_z, :k_z], c))

    starts = list(itertools.product(*[(lo, 0.5 * (lo + hi), hi) for lo, hi in box]))
    return min(minimize(stat, np.array(s0), bounds=box, method="L-BFGS-B",
                        options={"ftol": 1e-15, "gtol": 1e-12}).fun for s0 in starts)


@pytest.mark.parametrize("polytope", [False, True])
def test_robust_set_two_instruments_numeric(tmp_path, polytope):
    # brute force from the rows (numpy, no moments): at the ends of the numerically located set,
    # the minimum over γ of the robust AR statistic equals the chi-square(2) critical value
    from scipy import stats

    frame = design(k_z=2, strength=0.3, seed=4)
    if polytope:  # the same box written as a polytope takes the quadratic-programme route
        path = tmp_path / "box.csv"
        pd.DataFrame({"z1": [1, -1, 0, 0], "z2": [0, 0, 1, -1],
                      "bound": [0.03] * 4}).to_csv(path, index=False)
        res = bounds.sweep(from_frame(frame, spec_for(2)), polytope=str(path), points=3)
    else:
        res = run_sweep(frame, 2, ["-0.03:0.03", "-0.03:0.03"])
    assert res.ar_method.startswith("certified")
    crit = stats.chi2.ppf(0.95, 2)
    piece = res.ar_set[0]
    for end in (piece.low, piece.high):
        assert _ar_min_rows(frame, 2, end, [(-0.03, 0.03)] * 2) == pytest.approx(crit, rel=1e-5)


def test_irrelevant_instrument_gives_unbounded_sets():
    # common practice, no source: with an instrument unrelated to the treatment, both the union
    # interval and the weak-IV-robust set are unbounded, reported as null ends
    rng = np.random.default_rng(5)
    n = 1000
    frame = pd.DataFrame({"y": rng.normal(size=n), "x": rng.normal(size=n),
                          "z1": rng.normal(size=n), "w": rng.normal(size=n)})
    with pytest.warns(WeakInstrumentWarning):
        res = bounds.sweep(from_frame(frame, spec_for(1)), direct=["-0.01:0.01"])
    doc = res.to_dict()
    assert doc["union_ci"] == [None, None]
    assert any(None in piece for piece in doc["ar_set"])
    assert all(math.isfinite(v) for v in doc["union_ci_wald"])


# ------------------------------------------------------------------ priors
def test_local_to_zero_prior_formula():
    # Conley, Hansen & Rossi (2012): β̂ − aμ ± z√(V + a²σ²), with a from two refits
    # (reference library: linearmodels) — a = β̂(0) − β̂(1) since β̂ is linear in γ
    frame = design()
    b0, s0 = refit(frame, [0.0], "robust")
    b1, _ = refit(frame, [1.0], "robust")
    a = b0 - b1
    mu, sd = 0.02, 0.03
    res = prior.prior_analysis(from_frame(frame, spec_for(1)), priors=[f"normal:{mu}:{sd}"],
                               se="robust")
    half = 1.959963984540054 * math.sqrt(s0**2 + a * a * sd * sd)
    assert res.method == "closed-form"
    assert res.center == pytest.approx(b0 - a * mu, rel=REL)
    assert res.interval.low == pytest.approx(b0 - a * mu - half, rel=REL)
    assert res.interval.high == pytest.approx(b0 - a * mu + half, rel=REL)
    assert res.mc_error is None


def test_quadrature_agrees_with_simulation():
    # common practice, no source: two numerical routes to the same convolution agree within
    # Monte Carlo error (the simulation route is forced by a second, degenerate-ish instrument)
    frame = design()
    quad = prior.prior_analysis(from_frame(frame, spec_for(1)),
                                priors=["uniform:-0.05:0.1"])
    assert quad.method == "quadrature"
    core = core_of(frame, 1, "robust")
    lo_hi = prior.simulated_interval(core, [parse_prior("uniform:-0.05:0.1")], 0.95,
                                     400_000, seed=1)
    interval, _, err = lo_hi
    assert abs(interval.low - quad.interval.low) < 5 * err
    assert abs(interval.high - quad.interval.high) < 5 * err


def test_simulation_is_seeded_and_reports_error():
    frame = design(k_z=2)
    a = prior.prior_analysis(from_frame(frame, spec_for(2)),
                             priors=["uniform:-0.05:0.05", "triangular:-0.02:0:0.04"], seed=7,
                             draws=20_000)
    b = prior.prior_analysis(from_frame(frame, spec_for(2)),
                             priors=["uniform:-0.05:0.05", "triangular:-0.02:0:0.04"], seed=7,
                             draws=20_000)
    assert a.method == "simulation" and a.mc_error > 0
    assert a.interval == b.interval
    assert a.to_dict()["mc_error"] == a.mc_error


def test_prior_file_and_bad_priors(tmp_path):
    frame = design(k_z=2)
    good = tmp_path / "p.toml"
    good.write_text("mean = [0.0, 0.01]\ncov = [[1e-4, 0.0], [0.0, 4e-4]]\n")
    res = prior.prior_analysis(from_frame(frame, spec_for(2)), prior_file=str(good))
    indep = prior.prior_analysis(from_frame(frame, spec_for(2)),
                                 priors=["normal:0:0.01", "normal:0.01:0.02"])
    assert res.interval.low == pytest.approx(indep.interval.low, rel=1e-12)
    bad = tmp_path / "bad.json"
    bad.write_text('{"mean": [0, 0], "cov": [[1, 2], [2, 1]]}')
    with pytest.raises(InputError, match="positive semidefinite"):
        prior.prior_analysis(from_frame(frame, spec_for(2)), prior_file=str(bad))
    with pytest.raises(InputError, match="SD must be positive"):
        parse_prior("normal:0:0")
    with pytest.raises(InputError, match="unknown law"):
        parse_prior("cauchy:0:1")


# ------------------------------------------------------------------ coverage (simulation)
def _coverage(reps, n, seed):
    rng = np.random.default_rng(seed)
    union_hits = prior_hits = 0
    for r in range(reps):
        true_gamma = rng.uniform(-0.05, 0.05)
        frame = design(n=n, seed=int(rng.integers(1 << 30)), gamma=[true_gamma], strength=1.0)
        res = run_sweep(frame, 1, ["-0.05:0.05"], points=2)
        union_hits += res.union_ci.contains(0.5)
        drawn = rng.normal(0.0, 0.03)
        frame = design(n=n, seed=int(rng.integers(1 << 30)), gamma=[drawn], strength=1.0)
        pr = prior.prior_analysis(from_frame(frame, spec_for(1)), priors=["normal:0:0.03"])
        prior_hits += pr.interval.contains(0.5)
    return union_hits / reps, prior_hits / reps


def _binomial_floor(p, reps):
    return p - 3 * math.sqrt(p * (1 - p) / reps)


def test_coverage_fast_subset():
    # common practice, no source: Conley, Hansen & Rossi's union interval covers β at least at
    # the nominal rate when the true γ lies in the set; the prior interval covers at about the
    # nominal rate when γ is drawn from the prior (200 replications; 3 binomial SEs)
    union, prior_cov = _coverage(200, 400, seed=11)
    assert union >= _binomial_floor(0.95, 200)
    assert abs(prior_cov - 0.95) <= 3 * math.sqrt(0.95 * 0.05 / 200)


@pytest.mark.slow
def test_coverage_500_replications():
    union, prior_cov = _coverage(500, 1000, seed=12)
    assert union >= _binomial_floor(0.95, 500)
    assert abs(prior_cov - 0.95) <= 3 * math.sqrt(0.95 * 0.05 / 500)


def test_one_range_as_a_string_is_one_range_not_its_characters():
    # issue 15: direct="-0.01:0.01" was iterated character by character (common practice)
    from pathlib import Path

    from sensiv.data import Spec, from_file

    root = Path(__file__).resolve().parents[2]
    spec = Spec("maize_yield", ["irrigation_hours"], ["height_m"],
                controls=["plot_ha", "soil"], cluster="village")
    source = from_file(root / "examples" / "irrigation.csv", spec)
    one = bounds.sweep(source, direct="-0.005:0.005")
    listed = bounds.sweep(source, direct=["-0.005:0.005"])
    assert one.to_dict() == listed.to_dict()
