"""Chunk kernels on several threads, with results in chunk order.

The passes' per-chunk arithmetic (numpy's elementwise loops and BLAS products) releases the
GIL, so the chunks of a pass can be worked on by :data:`WORKERS` threads at once.  Each thread
keeps its own scratch state (``make_state``), results come back in the order of the chunks and
are combined by the caller in that order, so the answer does not depend on the number of
threads or on their timing.  At most ``2 × WORKERS`` chunks are in flight, so a streamed pass
still holds a bounded number of chunks.  While a pass runs, OpenBLAS uses one thread
(:mod:`sensiv.estimation.blas_threads`), so the threads are this module's, not BLAS's.
"""

from __future__ import annotations

import os
import threading
from collections import deque
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Any, TypeVar

from sensiv.estimation.blas_threads import one_blas_thread

Item = TypeVar("Item")
Result = TypeVar("Result")

WORKERS = max(1, min(2, os.cpu_count() or 1))
"""Threads per pass (two: the machines this runs on have few cores, and a streamed pass
reads its next chunk on one more thread)."""


def ordered_map(work: Callable[[Any, Item], Result], items: Iterable[Item],
                make_state: Callable[[], Any], workers: int | None = None
                ) -> Iterator[Result]:
    """``work(state, item)`` for every item, in the items' order; each thread has its own
    ``state = make_state()``.  One worker (or ``workers=1``) runs in the caller's thread."""
    workers = WORKERS if workers is None else workers
    with one_blas_thread():
        yield from _mapped(work, items, make_state, workers)


def _mapped(work: Callable[[Any, Item], Result], items: Iterable[Item],
            make_state: Callable[[], Any], workers: int) -> Iterator[Result]:
    if workers <= 1:
        state = make_state()
        for item in items:
            yield work(state, item)
        return
    local = threading.local()

    def run(item: Item) -> Result:
        if not hasattr(local, "state"):
            local.state = make_state()
        return work(local.state, item)

    pending: deque[Future] = deque()
    with ThreadPoolExecutor(max_workers=workers, thread_name_prefix="sensiv-pass") as pool:
        try:
            for item in items:
                pending.append(pool.submit(run, item))
                if len(pending) >= 2 * workers:
                    yield pending.popleft().result()
            while pending:
                yield pending.popleft().result()
        finally:
            for future in pending:
                future.cancel()
