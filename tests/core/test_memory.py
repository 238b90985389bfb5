"""Giving freed memory back: the C heap's trim and the command line's choice of Arrow's
allocator (common practice, no source; the effect on peak memory is measured in
tests/benchmarks/bench_absorb.py, not here)."""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest

from sensiv.core import memory


def test_release_freed_runs_and_keeps_live_data():
    kept = np.arange(1_000_000, dtype=np.float64)
    freed = [np.ones(200_000) for _ in range(20)]
    del freed
    memory.release_freed()
    memory.release_freed()           # the look-up is cached; a second call is the same
    assert kept.sum() == 999_999 * 1_000_000 / 2


def _backend(code: str, env: dict[str, str] | None = None) -> str:
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          check=True, env=env)
    return done.stdout.strip()


def test_command_line_chooses_the_system_allocator_before_arrow_is_imported():
    code = ("from sensiv.core.memory import prefer_system_allocator\n"
            "prefer_system_allocator()\n"
            "import pyarrow as pa; print(pa.default_memory_pool().backend_name)")
    assert _backend(code) == "system"


def test_a_users_choice_and_an_imported_arrow_are_left_alone(monkeypatch):
    import os

    plain = {k: v for k, v in os.environ.items() if k != "ARROW_DEFAULT_MEMORY_POOL"}
    own = _backend("import pyarrow as pa; print(pa.default_memory_pool().backend_name)", plain)
    if own == "system":
        pytest.skip("this pyarrow build has no pool of its own to choose")
    code = ("from sensiv.core.memory import prefer_system_allocator\n"
            "prefer_system_allocator()\n"
            "import pyarrow as pa; print(pa.default_memory_pool().backend_name)")
    assert _backend(code, {**plain, "ARROW_DEFAULT_MEMORY_POOL": own}) == own
    monkeypatch.delenv("ARROW_DEFAULT_MEMORY_POOL", raising=False)
    monkeypatch.setitem(sys.modules, "pyarrow", object())
    memory.prefer_system_allocator()
    assert "ARROW_DEFAULT_MEMORY_POOL" not in os.environ
