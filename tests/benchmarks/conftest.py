"""The benchmark scripts are run by hand (``python tests/benchmarks/bench_fit.py``), never by pytest."""

collect_ignore_glob = ["bench_*.py"]
