"""Correlation-restriction bounds: where the time goes, as ratios against in-process references.

Design (invented data, ``_design.py``): ``n`` rows, one treatment, one instrument, ten numeric
controls and a constant; unknown sign of endogeneity (both signs solved), ``--points`` ratios.

What is timed (best of ``--repeats``, after an untimed warm-up that compiles the programmes):

1. the curve through the parameter sweep (programmes built once, DPP, ``r̄`` set per point)
   against re-building and re-compiling the programmes at every point (target: the sweep at
   least ``SWEEP_TARGET`` times faster);
2. one bootstrap replicate's bounds by exact one-variable elimination (what
   ``correlation_bounds`` uses) against the cvxpy programmes; the two agree to ``AGREEMENT``;
3. the whole ``correlation_bounds`` call with ``--reps`` replicates, for information.

Usage: ``python tests/benchmarks/bench_corrbound.py [--n 100000] [--points 51] [--reps 999]``.
Prints ratios and PASS/MISS per target; the exit code is 0 whatever the outcome.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import _design  # noqa: E402

from sensiv.partial_id.correlation import correlation_bounds  # noqa: E402
from sensiv.partial_id.correlation_bootstrap import replicate_moments, resample_rows  # noqa: E402
from sensiv.partial_id.correlation_moments import eliminate, partial_correlations  # noqa: E402
from sensiv.partial_id.correlation_programme import (Programmes,  # noqa: E402
                                                     compiled_programmes)

DEFAULT_N = 100_000
DEFAULT_POINTS = 51
DEFAULT_REPS = 999
DEFAULT_REPEATS = 3
SWEEP_TARGET = 3.0
AGREEMENT = 1e-7
REPLICATE_SAMPLE = 20  # replicates solved both ways for the per-replicate comparison


def best_time(function, repeats: int):
    best, result = float("inf"), None
    for _ in range(repeats):
        start = time.perf_counter()
        result = function()
        best = min(best, time.perf_counter() - start)
    return best, result


def sweep(programmes_for, pc, ratios):
    """Both signs, both ends, at every ratio; ``programmes_for(ratio)`` supplies programmes."""
    out = []
    for ratio in ratios:
        programmes = programmes_for(ratio)
        programmes.load(pc)
        out.append([programmes.piece(s, float(ratio)) for s in (1, -1)])
    return out


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=DEFAULT_N)
    parser.add_argument("--points", type=int, default=DEFAULT_POINTS)
    parser.add_argument("--reps", type=int, default=DEFAULT_REPS)
    parser.add_argument("--repeats", type=int, default=DEFAULT_REPEATS)
    args = parser.parse_args(argv)

    import numpy as np

    from sensiv.data import from_frame
    from sensiv.estimation.moments import accumulate

    spec = _design.spec()
    frame = _design.frame(args.n)
    source = from_frame(frame, spec)
    layout = source.layout
    chunks = list(source.chunks())
    pc = partial_correlations(accumulate(chunks, layout.columns), layout)
    ratios = np.linspace(0.0, 1.0, args.points)

    built = compiled_programmes(1)
    sweep(lambda r: built, pc, ratios[:2])  # warm-up: compile once
    t_sweep, swept = best_time(lambda: sweep(lambda r: built, pc, ratios), args.repeats)
    t_rebuild, rebuilt = best_time(lambda: sweep(lambda r: Programmes(1), pc, ratios), 1)
    same = all(
        (a is None and b is None) or (a is not None and b is not None
                                      and np.allclose(a, b, rtol=AGREEMENT, atol=0))
        for pa, pb in zip(swept, rebuilt) for a, b in zip(pa, pb))

    rows = resample_rows(chunks, None)
    replicates = list(replicate_moments(*rows, layout.columns, REPLICATE_SAMPLE, 7))
    pcs = [partial_correlations(m, layout) for m in replicates]

    def by_elimination():
        return [[eliminate(p, s, 0.5) for s in (1, -1)] for p in pcs]

    def by_programme():
        out = []
        for p in pcs:
            built.load(p)
            out.append([built.piece(s, 0.5) for s in (1, -1)])
        return out

    t_elim, elim = best_time(by_elimination, args.repeats)
    t_lp, lp = best_time(by_programme, 1)
    worst = 0.0
    for pe, pl in zip(elim, lp):
        for a, b in zip(pe, pl):
            if (a is None) != (b is None):
                worst = float("inf")
            elif a is not None:
                for u, v in zip(a, b):
                    if np.isfinite(u) or np.isfinite(v):
                        worst = max(worst, abs(u - v) / max(1.0, abs(u)))
    start = time.perf_counter()
    correlation_bounds(source, points=args.points, reps=args.reps, seed=1, max_ratio=0.3,
                       progress=False)
    t_total = time.perf_counter() - start

    solves = 4 * args.points
    ratio = t_rebuild / t_sweep
    print(f"bench_corrbound: n={args.n:,}, 1 instrument, {_design.N_CONTROLS} controls + "
          f"constant, both signs, {args.points} ratios")
    print(f"  curve, parameter sweep            {t_sweep:8.3f} s  "
          f"({1e3 * t_sweep / solves:.1f} ms per programme solve)")
    print(f"  curve, re-built at every point    {t_rebuild:8.3f} s")
    print(f"  speed-up of the sweep: {ratio:6.1f}x   target >= {SWEEP_TARGET:g}x   "
          f"{_design.verdict(ratio >= SWEEP_TARGET)}   (same sets: {same})")
    print(f"  one replicate, elimination        {1e3 * t_elim / REPLICATE_SAMPLE:8.3f} ms")
    print(f"  one replicate, cvxpy programmes   {1e3 * t_lp / REPLICATE_SAMPLE:8.3f} ms   "
          f"({t_lp / t_elim:.0f}x slower)")
    print(f"  elimination vs programmes, max relative difference {worst:.1e}   "
          f"target <= {AGREEMENT:g}   {_design.verdict(worst <= AGREEMENT)}")
    print(f"  correlation_bounds(reps={args.reps}, points={args.points}) {t_total:8.3f} s   "
          "(information)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
