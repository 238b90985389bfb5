"""Cell counts of three discrete columns over clean chunks: the tabulation behind the discrete
bounds (:mod:`sensiv.partial_id.discrete_data`), as one kernel that the numpy engine runs in
this process and the Dask engine per partition (merged by :meth:`Cells.__add__`); the DuckDB
engine forms the same counts with a ``GROUP BY`` (:func:`~.engines.duckdb_engine.cells`).

The columns are the first three of each chunk: outcome ``y``, treatment ``x``, instrument
``z``.  Counting stops as soon as a column shows more distinct values than its limit (a
continuous column would otherwise make one cell per row); the caller then refuses the column
with the values seen so far.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True, slots=True)
class Cells:
    """Rows per cell ``(z, x, y)``, the distinct values of ``y``, ``x``, ``z`` met (more than
    a column's limit where counting stopped), the limits, and the rows dropped and
    filtered."""

    counts: dict
    seen: tuple[tuple[float, ...], tuple[float, ...], tuple[float, ...]]
    limits: tuple[int, int, int]
    dropped: int = 0
    filtered: int = 0

    def __add__(self, other: Cells) -> Cells:
        counts = dict(self.counts)
        for key, value in other.counts.items():
            counts[key] = counts.get(key, 0) + value
        seen = tuple(tuple(sorted(set(a) | set(b))) for a, b in zip(self.seen, other.seen))
        return Cells(counts, seen, self.limits, self.dropped + other.dropped,
                     self.filtered + other.filtered)


def beyond_limits(seen: Sequence, limits: Sequence[int]) -> bool:
    """Whether some column's distinct values ``seen`` outnumber its limit."""
    return any(len(s) > limit for s, limit in zip(seen, limits))


def count_cells(chunks: Iterable, limits: Sequence[int]) -> Cells:
    """:class:`Cells` of ``chunks`` (objects with ``values``, ``n_dropped``, ``n_filtered``),
    ``limits`` the largest number of levels of ``y``, ``x`` and ``z``."""
    limits = tuple(int(v) for v in limits)
    found: list[set] = [set(), set(), set()]
    cells: dict = {}
    dropped = filtered = 0
    for chunk in chunks:
        dropped += chunk.n_dropped
        filtered += getattr(chunk, "n_filtered", 0)
        values = chunk.values[:, :3]
        for j in range(3):
            found[j].update(np.unique(values[:, j]).tolist())
        if beyond_limits(found, limits):
            break
        rows, counts = np.unique(values, axis=0, return_counts=True)
        for (y, x, z), count in zip(rows.tolist(), counts.tolist()):
            cells[(z, x, y)] = cells.get((z, x, y), 0) + count
    return Cells(cells, tuple(tuple(sorted(s)) for s in found), limits, dropped, filtered)
