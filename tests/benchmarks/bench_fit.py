"""In-memory 2SLS with robust standard errors: sensiv against the reference library.

Design (invented data, ``_design.py``): ``n`` rows, one treatment, one instrument, ten numeric
controls and a constant; HC0 standard errors (``se="robust"``, ``small=False`` against
``cov_type="robust", debiased=False``).

What is timed, best of ``--repeats`` after an untimed warm-up on a small frame (imports and
first-call costs excluded for both):

* sensiv: ``iv.fit(from_frame(df, spec), se="robust")``, i.e. validation of the frame, both
  passes over the rows and every diagnostic that ``fit`` returns (OLS, first stage, AR set);
* reference: built **inside** the timer from the same DataFrame, as a user would: the
  exogenous frame with a constant column, the endogenous and instrument frames, model
  construction and ``fit``.  A second reference line builds those inputs outside the timer
  (model construction and ``fit`` only) to show how much of the gap is input preparation.

Targets: sensiv at least ``SPEEDUP_TARGET`` times faster than the reference from the
DataFrame; coefficients and standard errors agree to ``AGREEMENT_TARGET`` (relative).

Usage: ``python tests/benchmarks/bench_fit.py [--n 1000000] [--repeats 3] [--profile]``.
Prints ratios and PASS/MISS per target; the exit code is 0 whatever the outcome.
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
WARMUP_N = 2_000
SPEEDUP_TARGET = 10.0
AGREEMENT_TARGET = 1e-8
PROFILE_LINES = 20


def best_time(function, repeats: int):
    """Smallest wall time over ``repeats`` calls, and the last result."""
    best, result = float("inf"), None
    for _ in range(repeats):
        start = time.perf_counter()
        result = function()
        best = min(best, time.perf_counter() - start)
    return best, result


def sensiv_fit(frame, spec):
    from sensiv.estimation import iv
    from sensiv.data import from_frame
    from sensiv.core.errors import WeakInstrumentWarning

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        return iv.fit(from_frame(frame, spec), se="robust")


def reference_inputs(frame):
    exog = frame[list(_design.CONTROLS)].assign(const=1.0)
    return (frame[_design.OUTCOME], exog, frame[[_design.TREATMENT]],
            frame[[_design.INSTRUMENT]])


def reference_fit(inputs):
    from linearmodels.iv import IV2SLS

    return IV2SLS(*inputs).fit(cov_type="robust", debiased=False)


def agreement(ours, ref) -> tuple[float, float]:
    """Largest relative differences of coefficients and of standard errors, matched by name."""
    names = list(ours.tsls.names)
    coef = _design.relative_difference([ours.tsls.value(k) for k in names],
                                       ref.params[names].to_numpy())
    se = _design.relative_difference([ours.tsls.std_error(k) for k in names],
                                     ref.std_errors[names].to_numpy())
    return coef, se


def profile(frame, spec) -> None:
    import cProfile
    import pstats

    profiler = cProfile.Profile()
    profiler.enable()
    sensiv_fit(frame, spec)
    profiler.disable()
    print(f"\ncProfile of one sensiv fit (top {PROFILE_LINES} by cumulative time):")
    pstats.Stats(profiler, stream=sys.stdout).sort_stats("cumulative").print_stats(PROFILE_LINES)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=DEFAULT_N, help="rows (default %(default)s)")
    parser.add_argument("--repeats", type=int, default=DEFAULT_REPEATS,
                        help="timed repeats, best kept (default %(default)s)")
    parser.add_argument("--profile", action="store_true",
                        help="also print a cProfile of one sensiv fit")
    args = parser.parse_args(argv)

    import linearmodels
    import numpy
    import pandas

    import sensiv

    spec = _design.spec()
    warm = _design.frame(WARMUP_N)
    sensiv_fit(warm, spec)
    reference_fit(reference_inputs(warm))

    frame = _design.frame(args.n)
    t_ours, ours = best_time(lambda: sensiv_fit(frame, spec), args.repeats)
    t_ref, ref = best_time(lambda: reference_fit(reference_inputs(frame)), args.repeats)
    inputs = reference_inputs(frame)
    t_ref_fit, _ = best_time(lambda: reference_fit(inputs), args.repeats)
    coef_diff, se_diff = agreement(ours, ref)

    speedup = t_ref / t_ours
    print(f"bench_fit: n={args.n:,}, 1 treatment, 1 instrument, {_design.N_CONTROLS} controls "
          f"+ constant, robust (HC0) SEs; best of {args.repeats}")
    print(f"  versions: sensiv {sensiv.__version__}, linearmodels {linearmodels.__version__}, "
          f"numpy {numpy.__version__}, pandas {pandas.__version__}")
    print(f"  sensiv     iv.fit(from_frame(df, spec), se='robust')       {t_ours:8.3f} s")
    print(f"  reference  IV2SLS from the DataFrame (inputs inside timer)  {t_ref:8.3f} s")
    print(f"  reference  IV2SLS model + fit only (inputs built outside)   {t_ref_fit:8.3f} s")
    print(f"  speed-up reference/sensiv (from DataFrame): {speedup:6.1f}x   "
          f"target >= {SPEEDUP_TARGET:g}x   {_design.verdict(speedup >= SPEEDUP_TARGET)}")
    print(f"  speed-up reference/sensiv (model + fit only): {t_ref_fit / t_ours:6.1f}x   "
          "(information)")
    print(f"  max relative difference, coefficients: {coef_diff:.2e}   "
          f"target <= {AGREEMENT_TARGET:g}   {_design.verdict(coef_diff <= AGREEMENT_TARGET)}")
    print(f"  max relative difference, std errors:   {se_diff:.2e}   "
          f"target <= {AGREEMENT_TARGET:g}   {_design.verdict(se_diff <= AGREEMENT_TARGET)}")
    print(f"  2SLS estimate of '{_design.TREATMENT}': {ours.tsls.value(_design.TREATMENT):.6f} "
          f"(se {ours.tsls.std_error(_design.TREATMENT):.6f}); simulated effect "
          f"{_design.TRUE_EFFECT:g}")
    if args.profile:
        profile(frame, spec)
    return 0


if __name__ == "__main__":
    sys.exit(main())
