"""Weak-IV-robust sensitivity set: the certified method against the earlier 401-point grid.

Designs (invented, seeded, inside the script): one treatment and ``k`` instruments with a box
Γ; the reduced form and its robust (HC0) covariance come from ``n`` simulated rows
(``robust_set.reduced_form``), so only the set itself is timed:

* ``robust_set.robust_set`` (certified: interval bounds and bisection over the whole line);
* ``robust_set.grid_set`` (the earlier method: 401 bounded least squares and root refinement).

Target: certified ≤ 3× the grid on the 3-instrument box design (the other sizes are for
information).  Also printed: the number of pieces and the largest difference of their ends
(relative), which should be ≤ 1e-8 where the grid misses nothing.

Usage: ``python tests/benchmarks/bench_robust_set.py [--repeats 3]``; exit code 0.
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import _design  # noqa: E402

RATIO_TARGET = 3.0
SIZES = (2, 3, 5, 20)
N = 5_000


def best_time(function, repeats):
    best, out = float("inf"), None
    for _ in range(repeats):
        start = time.perf_counter()
        out = function()
        best = min(best, time.perf_counter() - start)
    return best, out


def reduced_form_of(k: int, seed: int):
    import numpy as np
    import pandas as pd

    from sensiv.core.errors import WeakInstrumentWarning
    from sensiv.data import Spec, from_frame
    from sensiv.estimation import iv
    from sensiv.sensitivity.direct_sets import box_set
    from sensiv.sensitivity.robust_set import reduced_form

    rng = np.random.default_rng(seed)
    z = rng.normal(size=(N, k))
    v = rng.normal(size=N)
    x = z @ np.full(k, 0.1) + v
    u = 0.6 * v + rng.normal(size=N) * (1 + 0.5 * np.abs(z[:, 0]))
    frame = pd.DataFrame({"y": 0.5 * x + u, "x": x})
    names = [f"z{j + 1}" for j in range(k)]
    for j, name in enumerate(names):
        frame[name] = z[:, j]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        result, pieces, sums = iv.fit_with_pieces(from_frame(frame, Spec("y", ("x",), names)),
                                                  se="robust", confidence_level=0.95,
                                                  small=False)
    widths = rng.uniform(0.005, 0.03, k)
    return reduced_form(pieces, sums, result), box_set(names, [(-w, w) for w in widths])


def largest_difference(a, b) -> float:
    import math

    if len(a) != len(b):
        return math.inf
    worst = 0.0
    for p, q in zip(a, b):
        for e1, e2 in ((p.low, q.low), (p.high, q.high)):
            if math.isfinite(e1) and math.isfinite(e2):
                worst = max(worst, abs(e1 - e2) / max(1.0, abs(e2)))
            elif e1 != e2:
                return math.inf
    return worst


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args(argv)

    from sensiv.sensitivity.robust_set import grid_set, robust_set

    rf, dset = reduced_form_of(2, 0)
    robust_set(rf, dset)  # warm-up: imports
    grid_set(rf, dset)
    print(f"bench_robust_set: box Γ, robust SEs from {N:,} rows; best of {args.repeats}")
    for k in SIZES:
        rf, dset = reduced_form_of(k, k)
        t_cert, (found, method) = best_time(lambda: robust_set(rf, dset), args.repeats)
        t_grid, old = best_time(lambda: grid_set(rf, dset), args.repeats)
        ratio = t_cert / t_grid
        line = (f"  {k:2d} instruments: certified {t_cert:7.3f} s, grid {t_grid:7.3f} s, "
                f"ratio {ratio:5.2f}; {len(found)} piece(s), ends differ by "
                f"{largest_difference(found, old):.1e}")
        if k == 3:
            line += f"   target <= {RATIO_TARGET:g}   {_design.verdict(ratio <= RATIO_TARGET)}"
        print(line)
    print(f"  method: {method}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
