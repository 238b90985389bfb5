"""Direct-effect sweep: closed forms against refitting the reference library per curve point.

Design (invented data, ``_design.py``): ``n`` rows, one treatment, one instrument, ten numeric
controls, robust (HC0) standard errors; the sweep takes ``--direct=-0.05:0.05`` and a curve of
``--points`` points with its breakdown and union interval.

Timed (best of ``--repeats``, after an untimed warm-up that pays the imports):

* ``fit``: ``iv.fit(from_frame(df, spec), se="robust")``;
* ``sweep``: ``bounds.sweep(from_frame(df, spec), direct=[...], points=1000)`` — both passes
  over the rows, the fit, and every sensitivity result;
* ``sweep, 100,000 points``: the same with ``points=100_000``; the extra cost of the points is
  measured on the closed forms alone (``bounds.analyse`` on pieces computed once, 100,000 vs
  1,000 points), since it is far below the run-to-run noise of the passes over the rows;
* ``refit``: the reference library's IV2SLS refitted on ``y − zγ`` at three values of γ,
  scaled linearly to one refit per curve point (1,000).

Targets: sweep at least 10,000x faster than one refit per curve point; the whole sweep at most
1.5x one fit; 100,000 curve points add less than 50 ms.  Also printed: agreement of β̂(γ) and
its SE with the refits (target 1e-8).

Usage: ``python tests/benchmarks/bench_sweep.py [--n 1000000] [--repeats 3]``; exit code 0.
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import _design  # noqa: E402

DEFAULT_N = 1_000_000
DEFAULT_REPEATS = 3
CURVE_POINTS = 1_000
MANY_POINTS = 100_000
REFIT_GAMMAS = (-0.05, 0.0, 0.05)
DIRECT = "-0.05:0.05"
SPEEDUP_TARGET = 10_000.0
SWEEP_OVER_FIT_TARGET = 1.5
EXTRA_POINTS_TARGET = 0.050
AGREEMENT_TARGET = 1e-8


def best_time(function, repeats):
    best, result = float("inf"), None
    for _ in range(repeats):
        start = time.perf_counter()
        result = function()
        best = min(best, time.perf_counter() - start)
    return best, result


def quiet(function):
    from sensiv.core.errors import WeakInstrumentWarning

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        return function()


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=DEFAULT_N)
    parser.add_argument("--repeats", type=int, default=DEFAULT_REPEATS)
    args = parser.parse_args(argv)

    import numpy as np
    from linearmodels.iv import IV2SLS

    from sensiv.sensitivity import bounds
    from sensiv.sensitivity.direct_sets import parse_range
    from sensiv.sensitivity.linear_core import build_core, focus_block
    from sensiv.estimation import iv
    from sensiv.data import from_frame

    spec = _design.spec()

    def fit(frame):
        return quiet(lambda: iv.fit(from_frame(frame, spec), se="robust"))

    def sweep(frame, points):
        return quiet(lambda: bounds.sweep(from_frame(frame, spec), direct=[DIRECT],
                                          se="robust", points=points))

    warm = _design.frame(2_000)
    fit(warm)
    sweep(warm, 10)

    frame = _design.frame(args.n)
    t_fit, _ = best_time(lambda: fit(frame), args.repeats)
    t_sweep, result = best_time(lambda: sweep(frame, CURVE_POINTS), args.repeats)
    t_many, _ = best_time(lambda: sweep(frame, MANY_POINTS), args.repeats)

    exog = frame[list(_design.CONTROLS)].assign(const=1.0)
    endog = frame[[_design.TREATMENT]]
    instr = frame[[_design.INSTRUMENT]]
    refits = []
    start = time.perf_counter()
    for g in REFIT_GAMMAS:
        y = frame[_design.OUTCOME] - g * frame[_design.INSTRUMENT]
        refits.append(IV2SLS(y, exog, endog, instr).fit(cov_type="robust", debiased=False))
    t_refit = (time.perf_counter() - start) / len(REFIT_GAMMAS)

    # agreement: β̂(γ) and SE(γ) from the closed form against the refits
    core_diff = 0.0
    src = from_frame(frame, spec)
    fitted, pieces, sums = quiet(lambda: iv.fit_with_pieces(
        src, se="robust", confidence_level=0.95, small=False,
        extra_blocks=lambda p: [focus_block(p, 0)]))
    core = build_core(pieces, sums, fitted, 0)
    for g, ref in zip(REFIT_GAMMAS, refits):
        b = float(core.beta(np.array([g]))[0])
        s = float(np.sqrt(core.variance(np.array([g]))[0]))
        core_diff = max(core_diff,
                        abs(b / ref.params[_design.TREATMENT] - 1),
                        abs(s / ref.std_errors[_design.TREATMENT] - 1))

    def closed_forms(points):
        return quiet(lambda: bounds.analyse(fitted, pieces, sums, 0,
                                            ranges=[parse_range(DIRECT)], points=points))

    t_few, _ = best_time(lambda: closed_forms(CURVE_POINTS), args.repeats + 2)
    t_lots, _ = best_time(lambda: closed_forms(MANY_POINTS), args.repeats + 2)
    brute = t_refit * CURVE_POINTS
    speedup = brute / t_sweep
    ratio = t_sweep / t_fit
    extra = t_lots - t_few
    print(f"bench_sweep: n={args.n:,}, 1 treatment, 1 instrument, {_design.N_CONTROLS} "
          f"controls, robust SEs, --direct={DIRECT}; best of {args.repeats}")
    print(f"  fit                                   {t_fit:9.3f} s")
    print(f"  sweep, {CURVE_POINTS:,} points                  {t_sweep:9.3f} s")
    print(f"  sweep, {MANY_POINTS:,} points                {t_many:9.3f} s")
    print(f"  reference refit, per point            {t_refit:9.3f} s "
          f"(x {CURVE_POINTS:,} points = {brute:,.0f} s)")
    print(f"  speed-up vs one refit per point: {speedup:,.0f}x   target >= "
          f"{SPEEDUP_TARGET:,.0f}x   {_design.verdict(speedup >= SPEEDUP_TARGET)}")
    print(f"  sweep / fit: {ratio:.2f}   target <= {SWEEP_OVER_FIT_TARGET}   "
          f"{_design.verdict(ratio <= SWEEP_OVER_FIT_TARGET)}")
    print(f"  closed forms alone: {1000 * t_few:.1f} ms at {CURVE_POINTS:,} points, "
          f"{1000 * t_lots:.1f} ms at {MANY_POINTS:,}")
    print(f"  extra time of {MANY_POINTS:,} points: {1000 * extra:.1f} ms   target < "
          f"{1000 * EXTRA_POINTS_TARGET:.0f} ms   {_design.verdict(extra < EXTRA_POINTS_TARGET)}")
    print(f"  closed form vs refits, max relative difference of beta and SE: {core_diff:.1e}"
          f"   target <= {AGREEMENT_TARGET:g}   {_design.verdict(core_diff <= AGREEMENT_TARGET)}")
    print(f"  union interval {result.union_ci}, breakdown scale {result.breakdown.scale}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
