"""One BLAS thread while the passes run their own threads.

The passes split their chunks over :data:`sensiv.estimation.parallel.WORKERS` threads, each
calling BLAS on blocks of a few thousand rows.  OpenBLAS would split each of those small
products over all cores again, and its threads spin while they wait: on a two-core machine
that is shared with other work, measured, the in-memory fit took 3× as long with OpenBLAS's
default two threads as with one.  :func:`one_blas_thread` sets OpenBLAS to one thread for the
duration of a pass and restores the previous count afterwards (nested and concurrent passes
restore it once, at the last exit).

The OpenBLAS that numpy loaded is found among the process's mapped libraries (Linux) and
driven through its ``*_set_num_threads`` entry point with :mod:`ctypes`; where no such library
or entry point is found (another BLAS, another system), this does nothing.  scipy carries an
OpenBLAS of its own, found once :mod:`scipy.linalg` has been imported.  Results do not
depend on it: OpenBLAS splits a product's output, not its sums, over threads.
"""

from __future__ import annotations

import ctypes
import functools
import sys
import threading
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any, TypeVar

import numpy as np

Result = TypeVar("Result")

_NAMES = ("scipy_openblas_{}_num_threads64_", "scipy_openblas_{}_num_threads",
          "openblas_{}_num_threads64_", "openblas_{}_num_threads")
_lock = threading.Lock()
_state: dict[str, Any] = {"depth": 0, "saved": [], "controls": None, "searched": None}


def _loaded_openblas() -> list[str]:
    """Paths of the mapped shared libraries whose name mentions OpenBLAS."""
    try:
        with open("/proc/self/maps", encoding="utf-8") as maps:
            paths = {line.split()[-1] for line in maps if len(line.split()) >= 6}
    except OSError:
        return []
    return sorted(path for path in paths
                  if "openblas" in path.rsplit("/", 1)[-1].lower() and ".so" in path)


def blas_controls() -> list[tuple[Any, Any]]:
    """``(get, set)`` of the number of threads of every OpenBLAS loaded (numpy's, and
    scipy's own once :mod:`scipy.linalg` is imported); empty where none is found."""
    key = "scipy.linalg" in sys.modules
    if _state["searched"] == key and _state["controls"] is not None:
        return _state["controls"]
    _state["searched"] = key
    import numpy  # noqa: F401  (loads numpy's BLAS)

    found = []
    for path in _loaded_openblas():
        try:
            library = ctypes.CDLL(path)
        except OSError:
            continue
        for name in _NAMES:
            get = getattr(library, name.format("get"), None)
            put = getattr(library, name.format("set"), None)
            if get is not None and put is not None:
                get.restype = ctypes.c_int
                put.argtypes = [ctypes.c_int]
                found.append((get, put))
                break
    _state["controls"] = found
    return found


@contextmanager
def one_blas_thread() -> Iterator[None]:
    """OpenBLAS on one thread inside the block (see the module docstring)."""
    with _lock:
        if _state["depth"] == 0:
            controls = blas_controls()
            _state["saved"] = [(put, get()) for get, put in controls]
            for put, _ in _state["saved"]:
                put(1)
        _state["depth"] += 1
    try:
        yield
    finally:
        with _lock:
            _state["depth"] -= 1
            if _state["depth"] == 0:
                for put, count in _state["saved"]:
                    put(count)
                _state["saved"] = []


def gram(a: np.ndarray) -> np.ndarray:
    """``a.T @ a``, through ``np.dot``: numpy's ``matmul`` keeps the interpreter lock (GIL)
    in its symmetric branch for ``a.T @ a`` (numpy 2.4, measured: a second thread's Python
    loop ran 2.2× slower while one thread ran such products, and two threads of them took as
    long as one), where ``dot`` releases it.  The same product: bit for bit on a contiguous
    block, to rounding on a strided slice.  The passes' threads form their products with
    this."""
    return np.dot(a.T, a)


def on_one_blas_thread(function: Callable[..., Result]) -> Callable[..., Result]:
    """Decorator: ``function`` runs inside :func:`one_blas_thread` (for code whose products
    are small, e.g. a fit's ``p × p`` solves after its passes)."""
    @functools.wraps(function)
    def wrapped(*args: Any, **kwargs: Any) -> Result:
        with one_blas_thread():
            return function(*args, **kwargs)
    return wrapped
