"""`sensiv run` on the demo recipe (three invented studies, every analysis, the whole report).

Timed in a subprocess, as a user runs it (imports included), best of ``--repeats``; the
reference is `python -c pass` in the same run, to show the interpreter's fixed cost.
Target: under 15 s on this kind of machine.  Also `sensiv --help`, target under 0.3 s.

Usage: ``python tests/benchmarks/bench_run.py [--repeats 2]``; exit code 0 whatever happens.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import _design  # noqa: E402

ROOT = Path(__file__).resolve().parents[2]
RUN_TARGET = 15.0
HELP_TARGET = 0.3


def best(command, repeats):
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        subprocess.run(command, check=True, capture_output=True)
        times.append(time.perf_counter() - start)
    return min(times)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=2)
    args = parser.parse_args(argv)
    cli = [sys.executable, "-m", "sensiv.cli"]
    with tempfile.TemporaryDirectory() as tmp:
        t_run = best([*cli, "run", str(ROOT / "examples" / "demo.toml"), "--out",
                      str(Path(tmp) / "out")], args.repeats)
    t_help = best([*cli, "--help"], 5)
    t_pass = best([sys.executable, "-c", "pass"], 5)
    print("bench_run: the demo recipe (3 invented studies, 9 analyses, report bundle)")
    print(f"  python -c pass        {t_pass:7.3f} s")
    print(f"  sensiv --help         {t_help:7.3f} s   target < {HELP_TARGET} s   "
          f"{_design.verdict(t_help < HELP_TARGET)}")
    print(f"  sensiv run demo.toml  {t_run:7.3f} s   target < {RUN_TARGET:g} s   "
          f"{_design.verdict(t_run < RUN_TARGET)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
