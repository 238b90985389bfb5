"""Start-up time of the command line: ``python -m sensiv.cli --help`` against ``python -c pass``.

Both commands run as fresh subprocesses with the same interpreter, best of ``--repeats``
after one untimed run of each (so bytecode caches exist, as after installation).  The bare
interpreter start is the reference: the ratio shows what sensiv adds, the absolute time is
the target.  On a MISS the slowest imports (``-X importtime``, cumulative) are listed to show
where the start-up goes.

Target: ``python -m sensiv.cli --help`` under ``HELP_TARGET_S`` seconds.

Usage: ``python tests/benchmarks/bench_help.py [--repeats 5]``.  Prints ratios and
PASS/MISS; the exit code is 0 whatever the outcome.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import _design  # noqa: E402

DEFAULT_REPEATS = 5
HELP_TARGET_S = 0.3
SLOWEST_IMPORTS = 12

HELP = [sys.executable, "-m", "sensiv.cli", "--help"]
BARE = [sys.executable, "-c", "pass"]
TYPER = [sys.executable, "-c", "import typer"]
TYPER_TARGET = 1.5            # every command's --help within this multiple of a bare import typer
COMMANDS = ("fit", "sweep", "prior", "corrbound", "discrete", "published", "calibrate", "run",
            "demo")


def best_time(command: list[str], repeats: int) -> float:
    subprocess.run(command, capture_output=True, check=True)  # untimed: caches, page cache
    best = float("inf")
    for _ in range(repeats):
        start = time.perf_counter()
        subprocess.run(command, capture_output=True, check=True)
        best = min(best, time.perf_counter() - start)
    return best


def slowest_imports(count: int) -> list[tuple[float, str]]:
    """Top-level imports of ``--help`` by cumulative time (microseconds → seconds)."""
    done = subprocess.run([sys.executable, "-X", "importtime", *HELP[1:]], capture_output=True,
                          text=True, check=False)
    found = []
    for line in done.stderr.splitlines():
        if not line.startswith("import time:") or "cumulative" in line:
            continue
        _, cumulative, name = line[len("import time:"):].split("|")
        # One space before a top-level name, more before nested ones (counted inside it).
        if not name[1:].startswith(" "):
            found.append((int(cumulative) / 1e6, name.strip()))
    return sorted(found, reverse=True)[:count]


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=DEFAULT_REPEATS,
                        help="timed runs of each command, best kept (default %(default)s)")
    parser.add_argument("--imports", action="store_true",
                        help="list the slowest imports even when the target is met")
    args = parser.parse_args(argv)

    t_help = best_time(HELP, args.repeats)
    t_bare = best_time(BARE, args.repeats)
    ok = t_help < HELP_TARGET_S
    print(f"bench_help: best of {args.repeats} fresh processes ({sys.executable})")
    print(f"  python -c pass                  {t_bare:7.3f} s")
    print(f"  python -m sensiv.cli --help     {t_help:7.3f} s   target < {HELP_TARGET_S:g} s   "
          f"{_design.verdict(ok)}")
    print(f"  ratio --help / bare interpreter {t_help / t_bare:7.1f}x   "
          f"(sensiv's own start-up: {t_help - t_bare:.3f} s)")
    t_typer = best_time(TYPER, args.repeats)
    print(f"  python -c 'import typer'        {t_typer:7.3f} s")
    for command in COMMANDS:
        t_command = best_time([*HELP[:-1], command, "--help"], args.repeats)
        ratio = t_command / t_typer
        print(f"  sensiv {command:<10} --help        {t_command:7.3f} s   {ratio:5.2f}x import typer"
              f"   target <= {TYPER_TARGET:g}x   {_design.verdict(ratio <= TYPER_TARGET)}")
    if args.imports or not ok:
        print("  slowest top-level imports of --help (cumulative, one run of -X importtime):")
        for seconds, name in slowest_imports(SLOWEST_IMPORTS):
            print(f"    {seconds:7.3f} s  {name}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
