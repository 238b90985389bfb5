"""The engines side by side: ``sensiv sweep`` over a partitioned Parquet data set, whole process.

Design (invented data, ``_design.py``): ``n`` rows in ``--files`` Parquet files (one treatment,
one instrument, ten numeric controls, a cluster column ``g`` with 1,000 groups), cluster
standard errors, one direct-effect range.  A child writes the files block by block into a
temporary directory, which is deleted at the end (the data stay under 3 GB at the default
``n``).

Each run is a fresh child process (this script with ``--child``) that runs the CLI in-process
and reports its wall time and its own peak RSS; the Dask runs connect to a two-worker local
cluster (processes, one thread each) started once beforehand, so the time is the engine's
work plus the scheduling overhead, and each worker's peak RSS is read on the worker (the
largest so far: at ``2n`` it includes the run at ``n``).

Ratios printed, against the numpy streaming engine on the same files:

* duckdb / numpy time (target ≤ 0.6) and duckdb peak RSS (target ≤ 1 GB);
* dask / numpy time (target ≤ 1.5) and peak RSS per worker (target ≤ 1 GB);
* time at ``2n`` / time at ``n`` per engine (linear scaling: target ≤ 2 × 1.25);
* the per-row cost of each engine (seconds per 10⁶ rows), for the README's cluster estimate.

The files are flushed to disk (``os.sync``) before the first timing, and each engine runs
``--repeats`` times (default 2) per size, the fastest reported (peak RSS: the largest).

Usage: ``python tests/benchmarks/bench_engines.py [--n 20000000] [--files 40] [--no-double]
[--repeats 2]``.
Prints ratios and PASS/MISS per target; the exit code is 0 whatever the outcome.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

import _design  # noqa: E402

GROUPS = 1_000
TARGETS = {"duckdb_time": 0.6, "dask_time": 1.5, "rss_mb": 1024, "scaling": 1.25}


def write(folder: Path, n: int, files: int) -> None:
    """``files`` Parquet files of about ``n / files`` rows each, block by block."""
    import numpy as np

    per = -(-n // files)
    for k in range(files):
        start, rows = k * per, min(per, n - k * per)
        if rows <= 0:
            break
        frame = _design.block(start, rows, k)
        frame["g"] = np.random.default_rng([7, k]).integers(0, GROUPS, rows)
        frame.to_parquet(folder / f"part-{k:03d}.parquet", index=False)


def command(folder: Path, engine: str, scheduler: str | None) -> list[str]:
    args = ["sweep", str(folder), "--outcome", _design.OUTCOME, "--treatment",
            _design.TREATMENT, "--instrument", _design.INSTRUMENT, "--cluster", "g",
            "--direct=-0.1:0.1", "--points", "21", "--json", "--engine", engine]
    for name in _design.CONTROLS:
        args += ["--control", name]
    return args + (["--scheduler", scheduler] if scheduler else [])


def child(args: list[str]) -> None:
    """One run of the command as a user runs it (the console script's ``main``, which also
    chooses the memory allocator before pyarrow is imported)."""
    from sensiv.cli.app import main

    sys.argv = ["sensiv", *args]
    start = time.perf_counter()
    try:
        main()
    except SystemExit as exc:
        if exc.code not in (0, None):
            raise
    seconds = time.perf_counter() - start
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    sys.stderr.write(json.dumps({"seconds": seconds, "rss_mb": peak}) + "\n")


def run(folder: Path, engine: str, scheduler: str | None) -> dict:
    done = subprocess.run([sys.executable, __file__, "--child", *command(folder, engine,
                                                                         scheduler)],
                          capture_output=True, text=True, check=True)
    report = json.loads(done.stderr.strip().splitlines()[-1])
    report["estimate"] = json.loads(done.stdout)["estimate"]
    return report


def measure(n: int, files: int, client, scheduler: str, repeats: int) -> dict:
    folder = Path(tempfile.mkdtemp(prefix="sensiv-engines-"))
    try:
        subprocess.run([sys.executable, __file__, "--write", str(folder), str(n), str(files)],
                       check=True)
        os.sync()  # the files' write-back to disk would otherwise run during the first timings
        size = sum(p.stat().st_size for p in folder.iterdir()) / 2**20
        out = {"n": n, "disk_mb": size}
        for engine in ("numpy", "duckdb", "dask"):
            runs = [run(folder, engine, scheduler if engine == "dask" else None)
                    for _ in range(repeats)]
            out[engine] = min(runs, key=lambda r: r["seconds"])
            out[engine]["rss_mb"] = max(r["rss_mb"] for r in runs)
            if engine == "dask":
                out["dask"]["worker_rss_mb"] = max(client.run(
                    lambda: resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024).values())
        return out
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def verdict(ok: bool) -> str:
    return "PASS" if ok else "MISS"


def report(first: dict, second: dict | None) -> None:
    base = first["numpy"]["seconds"]
    print(f"n = {first['n']:,} rows, {first['disk_mb']:.0f} MB of Parquet")
    for engine in ("numpy", "duckdb", "dask"):
        r = first[engine]
        per_row = r["seconds"] / first["n"] * 1e6
        print(f"  {engine:7s} {r['seconds']:8.2f} s  ({per_row:.3f} s per 1e6 rows)  "
              f"peak RSS {r['rss_mb']:.0f} MB  estimate {r['estimate']:.12g}")
    ratio = first["duckdb"]["seconds"] / base
    print(f"duckdb / numpy time {ratio:.2f} (target <= {TARGETS['duckdb_time']}) "
          f"{verdict(ratio <= TARGETS['duckdb_time'])}; peak RSS "
          f"{verdict(first['duckdb']['rss_mb'] <= TARGETS['rss_mb'])}")
    ratio = first["dask"]["seconds"] / base
    print(f"dask / numpy time {ratio:.2f} (target <= {TARGETS['dask_time']}) "
          f"{verdict(ratio <= TARGETS['dask_time'])}; worker peak RSS "
          f"{first['dask']['worker_rss_mb']:.0f} MB "
          f"{verdict(first['dask']['worker_rss_mb'] <= TARGETS['rss_mb'])}")
    same = {first[e]["estimate"] for e in ("numpy", "duckdb", "dask")}
    spread = (max(same) - min(same)) / abs(first["numpy"]["estimate"])
    print(f"estimates agree to {spread:.1e} (relative)")
    if second is not None:
        for engine in ("numpy", "duckdb", "dask"):
            growth = second[engine]["seconds"] / first[engine]["seconds"]
            print(f"{engine}: time at 2n / time at n = {growth:.2f} (target <= "
                  f"{2 * TARGETS['scaling']:.2f}) {verdict(growth <= 2 * TARGETS['scaling'])}")


def main() -> None:
    if sys.argv[1:2] == ["--child"]:
        child(sys.argv[2:])
        return
    if sys.argv[1:2] == ["--write"]:
        write(Path(sys.argv[2]), int(sys.argv[3]), int(sys.argv[4]))
        return
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=20_000_000)
    parser.add_argument("--files", type=int, default=40)
    parser.add_argument("--no-double", action="store_true", help="skip the 2n run")
    parser.add_argument("--repeats", type=int, default=2,
                        help="runs per engine and size; the fastest is reported")
    options = parser.parse_args()
    from distributed import Client, LocalCluster

    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                      dashboard_address=None) as cluster, Client(cluster) as client:
        first = measure(options.n, options.files, client, cluster.scheduler_address,
                        options.repeats)
        second = None if options.no_double else measure(2 * options.n, options.files, client,
                                                        cluster.scheduler_address,
                                                        options.repeats)
    report(first, second)


if __name__ == "__main__":
    main()
