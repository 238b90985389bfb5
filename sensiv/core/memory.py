"""How much memory this process may still take, for refusing a computation up front, and
giving freed memory back to the system.

Linux only in practice: ``MemAvailable`` of ``/proc/meminfo``, capped by the memory limit of
the process's cgroup (containers, batch schedulers) minus what the cgroup already uses.
Elsewhere, or when nothing can be read, the answer is ``None`` and callers skip their check.

Freed memory: the C heap keeps the pages of freed blocks below its mmap threshold, and keeps
them where they sit between blocks still in use (the chunks of a data set being gathered
interleave with the frames they were read from), so a process's resident size keeps what it
has freed.  :func:`release_freed` hands those pages back (glibc's ``malloc_trim``; a no-op
elsewhere), and :func:`prefer_system_allocator` makes Arrow allocate from that heap instead of
its own pool, which keeps freed blocks for reuse (the command line's choice, before Arrow is
imported; a user's ``ARROW_DEFAULT_MEMORY_POOL`` is respected).
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

_CGROUP_LIMITS = (("/sys/fs/cgroup/memory.max", "/sys/fs/cgroup/memory.current"),      # v2
                  ("/sys/fs/cgroup/memory/memory.limit_in_bytes",                       # v1
                   "/sys/fs/cgroup/memory/memory.usage_in_bytes"))
_UNLIMITED = 1 << 60  # cgroup v1 writes a huge number for "no limit"


def _read_int(path: str) -> int | None:
    try:
        text = Path(path).read_text().strip()
    except OSError:
        return None
    return int(text) if text.isdigit() else None


def _meminfo_available() -> int | None:
    try:
        lines = Path("/proc/meminfo").read_text().splitlines()
    except OSError:
        return None
    for line in lines:
        if line.startswith("MemAvailable:"):
            return int(line.split()[1]) * 1024
    return None


def available_memory() -> int | None:
    """Bytes of memory still available to this process, or ``None`` where unknown."""
    found = [value for value in (_meminfo_available(),) if value is not None]
    for limit_path, usage_path in _CGROUP_LIMITS:
        limit, usage = _read_int(limit_path), _read_int(usage_path)
        if limit is not None and limit < _UNLIMITED:
            found.append(max(limit - (usage or 0), 0))
    return min(found) if found else None


def format_bytes(size: float) -> str:
    """``37.3 GiB``-style text for a byte count."""
    for unit, scale in (("GiB", 2**30), ("MiB", 2**20), ("KiB", 2**10)):
        if size >= scale:
            return f"{size / scale:.1f} {unit}"
    return f"{int(size)} bytes"


_TRIM: list = []   # glibc's malloc_trim once looked up ([None] where there is none)


def release_freed() -> None:
    """Give the C heap's free pages back to the operating system (glibc), else nothing."""
    if not _TRIM:
        import ctypes             # here, not at the top: ``sensiv --help`` imports this module
        import ctypes.util

        try:
            library = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
            trim = library.malloc_trim
            trim.argtypes, trim.restype = [ctypes.c_size_t], ctypes.c_int
        except (OSError, AttributeError):
            trim = None
        _TRIM.append(trim)
    if _TRIM[0] is not None:
        _TRIM[0](0)


def prefer_system_allocator() -> None:
    """Arrow's buffers from the C heap (whose freed pages :func:`release_freed` can return)
    rather than Arrow's own pool; only before Arrow is imported and unless the user chose."""
    if "pyarrow" not in sys.modules:
        os.environ.setdefault("ARROW_DEFAULT_MEMORY_POOL", "system")
