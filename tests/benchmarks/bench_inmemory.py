"""The in-memory path against its floor: peak memory and time of ``iv.fit(from_frame(df))``.

For ``--controls`` 10 and 50 numeric controls (plus outcome, treatment and instrument) and
``n`` rows, each in a fresh child process:

* memory: the frame is built column by column (no consolidation copy), so the peak RSS
  before the fit is the frame itself; the fit's peak RSS above that is set against the used
  columns as float64 (``n × (columns + 1) × 8`` bytes, the constant included);
* time: the fit, conversion included, against the floor of two matrix products over the same
  data (``A.T @ A`` twice on a prepared float64 block of the used columns and the constant),
  best of ``--repeats``, in the same child.

Targets (performance issue, point 2): peak memory above the frame ≤ 1.5× the used columns;
fit ≤ 3× the floor.  A design whose dense form cannot fit in memory is refused up front
(``tests/data/test_dense_size.py``), so it is not timed here.

Usage: ``python tests/benchmarks/bench_inmemory.py [--n 1000000] [--repeats 3]``.  Prints
ratios and PASS/MISS; the exit code is 0 whatever the outcome.
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import _design  # noqa: E402

DEFAULT_N = 1_000_000
DEFAULT_REPEATS = 3
CONTROLS = (10, 50)
MEMORY_TARGET = 1.5
TIME_TARGET = 3.0


def _peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def child(n: int, controls: int, repeats: int) -> dict:
    import numpy as np
    import pandas as pd

    from sensiv.data import Spec, from_frame
    from sensiv.estimation import iv

    names = [f"w{j}" for j in range(controls)]
    spec = Spec(outcome="y", treatments=("x",), instruments=("z",), controls=tuple(names))
    rng = np.random.default_rng(_design.SEED)
    frame = pd.DataFrame(index=pd.RangeIndex(n))
    for name in names:
        frame[name] = rng.standard_normal(n)
    frame["z"] = rng.standard_normal(n)
    frame["x"] = 0.5 * frame["z"].to_numpy() + rng.standard_normal(n)
    frame["y"] = 2.0 * frame["x"].to_numpy() + rng.standard_normal(n) * (1 + np.abs(frame["z"]))
    iv.fit(from_frame(frame.iloc[:1000], spec), se="robust")      # imports, caches
    before = _peak_mb()
    started = time.perf_counter()
    iv.fit(from_frame(frame, spec), se="robust")
    first = time.perf_counter() - started
    after = _peak_mb()
    used_mb = n * (controls + 4) * 8 / 2**20

    block = np.asfortranarray(np.column_stack([np.ones(n), frame[["y", "x", "z", *names]]]))

    floor = _design.best_of(lambda: (block.T @ block, block.T @ block), repeats)
    fit = min(first, _design.best_of(lambda: iv.fit(from_frame(frame, spec), se="robust"),
                                     repeats))
    return {"controls": controls, "used_mb": used_mb, "frame_mb": before,
            "above_mb": after - before, "fit_s": fit, "floor_s": floor}


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=DEFAULT_N)
    parser.add_argument("--repeats", type=int, default=DEFAULT_REPEATS)
    parser.add_argument("--child", type=int, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child is not None:
        print(json.dumps(child(args.n, args.child, args.repeats)))
        return 0
    print(f"bench_inmemory: n = {args.n:,}, robust SEs, best of {args.repeats}, fresh child "
          "per design")
    for controls in CONTROLS:
        done = subprocess.run([sys.executable, __file__, "--n", str(args.n), "--repeats",
                               str(args.repeats), "--child", str(controls)],
                              capture_output=True, text=True, check=True)
        r = json.loads(done.stdout.strip().splitlines()[-1])
        memory = r["above_mb"] / r["used_mb"]
        speed = r["fit_s"] / r["floor_s"]
        print(f"  {controls} controls: used columns {r['used_mb']:.0f} MB, peak above the frame "
              f"{r['above_mb']:.0f} MB = {memory:.2f}x   target <= {MEMORY_TARGET:g}x   "
              f"{_design.verdict(memory <= MEMORY_TARGET)}")
        print(f"  {'':>{len(str(controls))}}           fit {r['fit_s']:.3f} s, floor (two products) "
              f"{r['floor_s']:.3f} s = {speed:.1f}x   target <= {TIME_TARGET:g}x   "
              f"{_design.verdict(speed <= TIME_TARGET)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
