"""Direct-effect sweep with many instruments: no ``2^k`` corners.

Design (invented data, generated here): ``n`` rows, one treatment, ``k`` instruments
``z1..zk`` (independent standard normals, first-stage coefficient ``0.5/√k`` each), ten
numeric controls, an error correlated with the treatment and heteroskedastic in ``z1``;
robust (HC0) standard errors; ``--direct=-0.05:0.05`` for every instrument; a 101-point curve
with its breakdown scale, frontier and bias-aware interval (``bounds.sweep``, everything).

Timed in one process (best of ``--repeats`` after an untimed warm-up): the sweep with 1, 20
and 50 instruments on the same number of rows, and the fit alone (``iv.fit``, robust SEs) of
each; the 20 / 1 ratio is printed for the whole sweep and for its sensitivity part (sweep −
fit: the sweep's extra pass-2 blocks and everything after the passes).  The data do not have
the same width: 12 columns with one instrument, 31 with 20, 61 with 50.  Peak memory: a fresh
child process builds the frame, resets its peak-RSS mark (Linux ``/proc/self/clear_refs``; the
generator's temporaries exceed the frame) and reports the peak of the 50-instrument sweep,
frame included (``VmHWM``), beside a child that only builds the data and fits (so the
sensitivity part's own memory is the difference), and a child that runs the same sweep
streamed from a Parquet file (written by another child beforehand, deleted at the end),
beside a child that only imports the libraries.

Targets: 20 instruments ≤ 2× the 1-instrument sweep; 50 instruments ≤ 60 s with both union
ends certified (relative gap ≤ 1e-6) and peak memory ≤ 1 GB.

Usage: ``python tests/benchmarks/bench_many.py [--n 1000000] [--repeats 1]``; exit code 0.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
import warnings
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import _design  # noqa: E402

DEFAULT_N = 1_000_000
DIRECT = "-0.05:0.05"
RATIO_TARGET = 2.0
TIME_TARGET_S = 60.0
GAP_TARGET = 1e-6
MEMORY_TARGET_MB = 1024.0
SEED = 20261202


def frame(n: int, k: int):
    import numpy as np
    import pandas as pd

    rng = np.random.default_rng([SEED, k])
    w = rng.standard_normal((n, _design.N_CONTROLS))
    z = rng.standard_normal((n, k))
    shock = rng.standard_normal(n)
    x = z @ np.full(k, 0.5 / np.sqrt(k)) + 0.2 * w[:, 0] + shock
    noise = rng.standard_normal(n) * (1.0 + np.abs(z[:, 0]))
    y = 1.0 + 2.0 * x + 0.3 * w[:, 1] + 0.8 * shock + noise
    data = {"y": y, "x": x, **{f"z{j + 1}": z[:, j] for j in range(k)},
            **{f"w{j + 1}": w[:, j] for j in range(_design.N_CONTROLS)}}
    return pd.DataFrame(data)


def spec(k: int):
    from sensiv.data import Spec

    return Spec(outcome="y", treatments=("x",), instruments=tuple(f"z{j + 1}" for j in range(k)),
                controls=tuple(f"w{j + 1}" for j in range(_design.N_CONTROLS)))


def run_sweep(df, k: int):
    from sensiv.data import from_frame

    return sweep_source(from_frame(df, spec(k)), k)


def sweep_source(source, k: int):
    from sensiv.core.errors import WeakInstrumentWarning
    from sensiv.sensitivity import bounds

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        return bounds.sweep(source, direct=[DIRECT] * k, se="robust", points=101)


def run_fit(df, k: int):
    from sensiv.core.errors import WeakInstrumentWarning
    from sensiv.data import from_frame
    from sensiv.estimation import iv

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        return iv.fit(from_frame(df, spec(k)), se="robust")


def reset_peak() -> bool:
    """Reset the kernel's peak-RSS mark of this process (Linux ``clear_refs``); False if not
    possible (then the peak includes building the frame: its temporaries exceed the frame)."""
    try:
        with open("/proc/self/clear_refs", "w") as handle:
            handle.write("5")
        return True
    except OSError:
        return False


def peak_now() -> float:
    """Peak RSS (MB) since the start or the last :func:`reset_peak`."""
    import re
    import resource

    try:
        with open("/proc/self/status") as handle:
            return int(re.search(r"VmHWM:\s+(\d+)", handle.read()).group(1)) / 1024
    except (OSError, AttributeError):
        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def child(n: int, k: int, mode: str, path: str | None) -> None:
    import gc

    if mode == "write":
        frame(n, k).to_parquet(path, row_group_size=100_000)
    elif mode == "stream":
        from sensiv.data import from_file

        sweep_source(from_file(path, spec(k)), k)
    elif mode == "imports":
        import pyarrow.parquet  # noqa: F401

        import sensiv.sensitivity.bounds  # noqa: F401
    else:
        import sensiv.sensitivity.bounds  # noqa: F401

        df = frame(n, k)
        gc.collect()
        reset_peak()            # the peak of building the frame is not sensiv's
        run_fit(df, k) if mode == "fit" else run_sweep(df, k)
    print(json.dumps({"peak_mb": peak_now()}))


def peak_mb(n: int, k: int, mode: str, path: str | None = None) -> float:
    done = subprocess.run([sys.executable, __file__, "--child", str(k), "--n", str(n),
                           "--mode", mode, *(["--path", path] if path else [])],
                          capture_output=True, text=True, check=True)
    return json.loads(done.stdout.strip().splitlines()[-1])["peak_mb"]


def streamed_peaks(n: int, k: int) -> tuple[float, float]:
    """Peak RSS of the streamed sweep and of a child that only imports (file deleted after)."""
    with tempfile.TemporaryDirectory() as folder:
        path = str(Path(folder) / "many.parquet")
        peak_mb(n, k, "write", path)
        return peak_mb(n, k, "stream", path), peak_mb(n, k, "imports")


def best_time(call, repeats: int):
    best, out = float("inf"), None
    for _ in range(repeats):
        start = time.perf_counter()
        out = call()
        best = min(best, time.perf_counter() - start)
    return best, out


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=DEFAULT_N)
    parser.add_argument("--repeats", type=int, default=1)
    parser.add_argument("--child", type=int, default=None, help=argparse.SUPPRESS)
    parser.add_argument("--mode", default="sweep", help=argparse.SUPPRESS)
    parser.add_argument("--path", default=None, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child is not None:
        child(args.n, args.child, args.mode, args.path)
        return 0

    # The children first: Linux carries the peak RSS of the parent into a child started by
    # vfork + exec (Python's subprocess), so the parent must not have held any data yet.
    memory = peak_mb(args.n, 50, "sweep")
    memory_fit = peak_mb(args.n, 50, "fit")
    memory_stream, memory_imports = streamed_peaks(args.n, 50)
    run_sweep(frame(2_000, 20), 20)                  # warm-up: imports
    times, fits, results = {}, {}, {}
    for k in (1, 20, 50):
        df = frame(args.n, k)
        fits[k] = best_time(lambda: run_fit(df, k), args.repeats)[0]
        times[k], results[k] = best_time(lambda: run_sweep(df, k), args.repeats)
        del df
    method = results[50].union_method
    gap = max(method.lower_gap, method.upper_gap)
    ratio = times[20] / times[1]
    part = (times[20] - fits[20]) / max(times[1] - fits[1], 1e-9)
    print(f"bench_many: n={args.n:,}, 1 treatment, {_design.N_CONTROLS} controls, robust SEs, "
          f"--direct={DIRECT} per instrument, 101 curve points; best of {args.repeats}")
    for k in (1, 20, 50):
        m = results[k].union_method
        print(f"  sweep, {k:2d} instrument(s)   {times[k]:8.2f} s   (fit alone {fits[k]:.2f} s, "
              f"sensitivity part {times[k] - fits[k]:.2f} s)   union ends: {m.lower} / "
              f"{m.upper}, exact {m.exact}, curve exact {m.curve_exact}")
    print(f"  20 / 1 instruments, whole sweep: {ratio:.2f}   target <= {RATIO_TARGET}   "
          f"{_design.verdict(ratio <= RATIO_TARGET)}")
    print(f"  20 / 1 instruments, sensitivity part (sweep - fit): {part:.2f};  20-instrument "
          f"fit alone / whole 1-instrument sweep: {fits[20] / times[1]:.2f}")
    print(f"  50 instruments: {times[50]:.1f} s   target <= {TIME_TARGET_S:g} s   "
          f"{_design.verdict(times[50] <= TIME_TARGET_S)}")
    print(f"  50 instruments: relative gap {gap:.1e}   target <= {GAP_TARGET:g}   "
          f"{_design.verdict(gap <= GAP_TARGET and method.exact)}")
    print(f"  50 instruments: peak RSS {memory:.0f} MB (data and fit alone {memory_fit:.0f} MB)"
          f"   target <= {MEMORY_TARGET_MB:g} MB   {_design.verdict(memory <= MEMORY_TARGET_MB)}")
    print(f"  50 instruments streamed from Parquet: peak RSS {memory_stream:.0f} MB (imports "
          f"alone {memory_imports:.0f} MB)   {_design.verdict(memory_stream <= MEMORY_TARGET_MB)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
