"""Streaming a Parquet file: peak memory, time against the in-memory path, equal moments.

Design (invented data, ``_design.py``): ``n`` rows, one treatment, one instrument, ten numeric
controls; robust (HC0) standard errors.  A child process writes the file to a temporary
directory block by block (``--row-group`` rows per block and per row group), so neither the
generator nor this parent ever holds the whole data set.

Every measurement runs in a fresh child process (this script re-run with ``--child``):

* ``baseline``  — imports sensiv, numpy, pandas and pyarrow only: the fixed cost of a process;
* ``stream``    — ``iv.fit(from_file(path, spec), se="robust")`` once; its peak RSS is the
  memory target;
* ``memory``    — ``iv.fit(from_frame(pd.read_parquet(path), spec), se="robust")`` once, for
  contrast (memory that grows with the file);
* ``compare``   — times both paths, load included, alternating, best of ``--repeats`` after
  an untimed warm-up fit on a small frame (first-call imports excluded), and checks that
  the moments (``accumulate``) and the 2SLS estimates of the two paths agree.

Peak RSS is ``resource.getrusage(RUSAGE_SELF).ru_maxrss`` (KB on Linux) read at the end of the
child.  Linux carries a process's peak RSS across ``exec`` from the process that forked it,
so this parent imports nothing heavy and never holds data: a child's number is its own.

Targets: streaming peak RSS < ``RSS_TARGET_MB`` MB; streaming time / in-memory time <=
``TIME_RATIO_TARGET``; ``Moments.relative_difference`` <= ``MOMENTS_TARGET``.

Usage: ``python tests/benchmarks/bench_stream.py [--n 5000000] [--repeats 3] [--chunk-rows K]
[--profile]``.
Prints ratios and PASS/MISS per target; the exit code is 0 whatever the outcome.
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

import _design  # noqa: E402  (imports nothing heavy at module level)

DEFAULT_N = 5_000_000
DEFAULT_REPEATS = 3
WARMUP_N = 2_000
ROW_GROUPS = 5
"""Row groups in the written file ("a few"); each is generated and written on its own."""
RSS_TARGET_MB = 400.0
TIME_RATIO_TARGET = 1.5
MOMENTS_TARGET = 1e-10
PROFILE_LINES = 20
KB_PER_MB = 1024.0


# ----------------------------------------------------------------------------- children
def _peak_rss_kb() -> int:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss


def _quiet_fit(source):
    import warnings

    from sensiv.estimation import iv
    from sensiv.core.errors import WeakInstrumentWarning

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        return iv.fit(source, se="robust")


CHUNK_ROWS: dict[str, int] = {}
"""``{"chunk_rows": k}`` when ``--chunk-rows`` is given; empty keeps the library default."""


def _streamed(path: Path):
    from sensiv.data import from_file

    return from_file(path, _design.spec(), **CHUNK_ROWS)


def _stream_fit(path: Path):
    return _quiet_fit(_streamed(path))


def _memory_fit(path: Path):
    import pandas as pd

    from sensiv.data import from_frame

    return _quiet_fit(from_frame(pd.read_parquet(path), _design.spec()))


def child_write(path: Path, n: int, rows_per_group: int) -> dict:
    import pyarrow as pa
    import pyarrow.parquet as pq

    start = time.perf_counter()
    writer = None
    try:
        for block in _design.blocks(n, rows_per_group):
            table = pa.Table.from_pandas(block, preserve_index=False)
            if writer is None:
                writer = pq.ParquetWriter(path, table.schema)
            writer.write_table(table, row_group_size=rows_per_group)
    finally:
        if writer is not None:
            writer.close()
    metadata = pq.ParquetFile(path).metadata
    return {"seconds": time.perf_counter() - start, "row_groups": metadata.num_row_groups,
            "rows": metadata.num_rows, "bytes": path.stat().st_size,
            "peak_rss_kb": _peak_rss_kb()}


def child_baseline() -> dict:
    import numpy  # noqa: F401
    import pandas  # noqa: F401
    import pyarrow  # noqa: F401
    import pyarrow.parquet  # noqa: F401

    import sensiv  # noqa: F401
    import sensiv.data  # noqa: F401
    import sensiv.estimation.iv  # noqa: F401
    import sensiv.estimation.moments  # noqa: F401

    return {"peak_rss_kb": _peak_rss_kb()}


def child_once(path: Path, mode: str) -> dict:
    fit = {"stream": _stream_fit, "memory": _memory_fit}[mode]
    start = time.perf_counter()
    result = fit(path)
    seconds = time.perf_counter() - start
    return {"seconds": seconds, "peak_rss_kb": _peak_rss_kb(), "n": result.n}


def child_compare(path: Path, repeats: int, profile: bool) -> dict:
    import pandas as pd

    from sensiv.data import from_frame
    from sensiv.estimation.moments import accumulate

    spec = _design.spec()
    _quiet_fit(from_frame(_design.frame(WARMUP_N), spec))  # first-call imports, untimed
    best = {"stream": float("inf"), "memory": float("inf")}
    fits = {}
    for _ in range(repeats):
        for mode, fit in (("stream", _stream_fit), ("memory", _memory_fit)):
            start = time.perf_counter()
            fits[mode] = fit(path)
            best[mode] = min(best[mode], time.perf_counter() - start)

    streamed = _streamed(path)
    in_memory = from_frame(pd.read_parquet(path), spec)
    m_stream = accumulate(streamed.chunks(), streamed.layout.columns)
    m_memory = accumulate(in_memory.chunks(), in_memory.layout.columns)
    del in_memory

    names = list(fits["memory"].tsls.names)
    coef = _design.relative_difference([fits["stream"].tsls.value(k) for k in names],
                                       [fits["memory"].tsls.value(k) for k in names])
    se = _design.relative_difference([fits["stream"].tsls.std_error(k) for k in names],
                                     [fits["memory"].tsls.std_error(k) for k in names])
    out = {"stream_seconds": best["stream"], "memory_seconds": best["memory"],
           "moments_difference": m_stream.relative_difference(m_memory),
           "n_stream": m_stream.n, "n_memory": m_memory.n,
           "coef_difference": coef, "se_difference": se,
           "estimate": fits["stream"].tsls.value(_design.TREATMENT)}
    if profile:
        out["profile"] = {mode: _profile_text(fit, path)
                          for mode, fit in (("stream", _stream_fit), ("memory", _memory_fit))}
    return out


def _profile_text(fit, path: Path) -> str:
    import cProfile
    import io
    import pstats

    profiler = cProfile.Profile()
    profiler.enable()
    fit(path)
    profiler.disable()
    text = io.StringIO()
    pstats.Stats(profiler, stream=text).sort_stats("cumulative").print_stats(PROFILE_LINES)
    return text.getvalue()


def run_child(argv: list[str]) -> int:
    parser = argparse.ArgumentParser()
    parser.add_argument("--child", required=True,
                        choices=["write", "baseline", "stream", "memory", "compare"])
    parser.add_argument("--path", type=Path)
    parser.add_argument("--n", type=int)
    parser.add_argument("--row-group", type=int)
    parser.add_argument("--repeats", type=int, default=1)
    parser.add_argument("--profile", action="store_true")
    parser.add_argument("--chunk-rows", type=int)
    args = parser.parse_args(argv)
    if args.chunk_rows is not None:
        CHUNK_ROWS["chunk_rows"] = args.chunk_rows
    if args.child == "write":
        report = child_write(args.path, args.n, args.row_group)
    elif args.child == "baseline":
        report = child_baseline()
    elif args.child == "compare":
        report = child_compare(args.path, args.repeats, args.profile)
    else:
        report = child_once(args.path, args.child)
    print(json.dumps(report))
    return 0


# ----------------------------------------------------------------------------- parent
def spawn(*arguments: str) -> dict:
    """Run this script as a child and return the JSON line it prints last."""
    command = [sys.executable, str(Path(__file__).resolve()), *arguments]
    done = subprocess.run(command, capture_output=True, text=True, check=False)
    if done.returncode != 0:
        raise RuntimeError(f"child {' '.join(arguments)} failed with exit code "
                           f"{done.returncode}:\n{done.stderr}")
    return json.loads(done.stdout.strip().splitlines()[-1])


def mb(kb: float) -> float:
    return kb / KB_PER_MB


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    if "--child" in argv:
        return run_child(argv)
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=DEFAULT_N, help="rows (default %(default)s)")
    parser.add_argument("--repeats", type=int, default=DEFAULT_REPEATS,
                        help="timed repeats of each path, best kept (default %(default)s)")
    parser.add_argument("--profile", action="store_true",
                        help="also print a cProfile of one streaming and one in-memory fit")
    parser.add_argument("--chunk-rows", type=int, default=None,
                        help="rows per streamed chunk (default: from_file's own default)")
    args = parser.parse_args(argv)
    rows_per_group = -(-args.n // ROW_GROUPS)
    chunking = [] if args.chunk_rows is None else ["--chunk-rows", str(args.chunk_rows)]

    with tempfile.TemporaryDirectory(prefix="sensiv-bench-") as folder:
        path = Path(folder) / "design.parquet"
        written = spawn("--child", "write", "--path", str(path), "--n", str(args.n),
                        "--row-group", str(rows_per_group))
        baseline = spawn("--child", "baseline")
        stream = spawn("--child", "stream", "--path", str(path), *chunking)
        memory = spawn("--child", "memory", "--path", str(path))
        compare = spawn("--child", "compare", "--path", str(path), "--repeats",
                        str(args.repeats), *chunking, *(["--profile"] if args.profile else []))

    rss = mb(stream["peak_rss_kb"])
    ratio = compare["stream_seconds"] / compare["memory_seconds"]
    moments = compare["moments_difference"]
    print(f"bench_stream: n={args.n:,} rows, {written['row_groups']} row groups, "
          f"{written['bytes'] / 1e6:.0f} MB Parquet (written in {written['seconds']:.1f} s, "
          f"writer peak RSS {mb(written['peak_rss_kb']):.0f} MB); robust SEs; chunk_rows "
          f"{'library default' if args.chunk_rows is None else f'{args.chunk_rows:,}'}")
    print("  peak RSS (ru_maxrss at the end of a fresh child process):")
    print(f"    baseline: import sensiv, numpy, pandas, pyarrow          "
          f"{mb(baseline['peak_rss_kb']):7.0f} MB")
    print(f"    streaming: iv.fit(from_file(path, spec))                  {rss:7.0f} MB   "
          f"target < {RSS_TARGET_MB:g} MB   {_design.verdict(rss < RSS_TARGET_MB)}")
    print(f"      above the baseline                                      "
          f"{rss - mb(baseline['peak_rss_kb']):7.0f} MB")
    print(f"    in memory: iv.fit(from_frame(pd.read_parquet(path), spec)) "
          f"{mb(memory['peak_rss_kb']):6.0f} MB   (contrast)")
    print(f"  time, load included, best of {args.repeats} in one child (alternating):")
    print(f"    streaming {compare['stream_seconds']:7.2f} s   in memory "
          f"{compare['memory_seconds']:7.2f} s   (single runs above: "
          f"{stream['seconds']:.2f} s, {memory['seconds']:.2f} s)")
    print(f"    ratio streaming/in-memory {ratio:5.2f}x   target <= {TIME_RATIO_TARGET:g}x   "
          f"{_design.verdict(ratio <= TIME_RATIO_TARGET)}")
    print(f"  moments, streaming vs in memory: relative_difference {moments:.2e}   "
          f"target <= {MOMENTS_TARGET:g}   {_design.verdict(moments <= MOMENTS_TARGET)}   "
          f"(rows {compare['n_stream']:,} vs {compare['n_memory']:,})")
    print(f"  2SLS, streaming vs in memory: max relative difference coef "
          f"{compare['coef_difference']:.1e}, SE {compare['se_difference']:.1e}; estimate "
          f"of '{_design.TREATMENT}' {compare['estimate']:.6f} (simulated effect "
          f"{_design.TRUE_EFFECT:g})")
    for mode, text in compare.get("profile", {}).items():
        print(f"\ncProfile of one {mode} fit (top {PROFILE_LINES} by cumulative time):\n{text}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
