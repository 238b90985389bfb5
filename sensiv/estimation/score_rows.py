r"""Pass 2's per-row arithmetic: the rows whose sums give every score block's meat.

A block's score is :math:`g_i = w_i\,\mathrm{vec}(a_i ⊗ e_i)` with :math:`a_i = \tilde d_i L`
and :math:`e_i = \tilde d_i R` (:class:`sensiv.estimation.moments.ScoreBlock`).  When ``R``
is one column — a residual — the score is a fixed linear map of the *residual-weighted row*
:math:`h_i = w_i e_i \tilde d_i`:

.. math::

    g_i = h_i L, \qquad \sum_i g_i g_i' = L' \Big(\sum_i h_i' h_i\Big) L, \qquad
    s_g = \Big(\sum_{i∈g} h_i\Big) L,

and every block with the same residual (the 2SLS and overidentification blocks) shares one
``h``.  Per chunk that is one residual per distinct ``R`` (a matrix–vector product), one
scaling of the centred rows and one product whose result is ``(1+p) × (1+p)`` — instead of
forming ``aᵢ`` for every block by a product whose result has a row per data row, which was
the slowest operation of the pass (it writes ``rows × maps`` numbers and, on a busy
multi-core machine, OpenBLAS threads wait on each other over it).  A block with several
residual columns (the first stages), or whose ``L`` is much narrower than the row, keeps its
own per-row scores — unless it carries a smaller basis of both its maps, whose distinct
products then stand in for the scores (:mod:`sensiv.estimation.symmetric_rows`).
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence

import numpy as np

from sensiv.estimation.symmetric_rows import distinct_count, fold, products

MAX_BUFFERS = 16
"""Scratch arrays kept between chunks (a few per chunk size; the last chunk is shorter)."""

NARROW_SHARE = 4
"""A one-residual block whose ``L`` has fewer than ``(1+p)/NARROW_SHARE`` columns keeps its
own scores, unless another block already forms the residual-weighted rows of its residual."""


PASS2_ROWS = 16_384
"""Rows of a chunk turned into score rows at a time in pass 2: the score rows are several
times wider than the data (e.g. 280 numbers per row with 50 instruments), so whole chunks of
them cost more memory than the chunk itself."""


CACHE_ROWS = 4096
"""Rows pass 2 turns into score rows at a time (they stay in cache until multiplied)."""


def cache_blocks(values: np.ndarray, weights: np.ndarray | None
                 ) -> Iterator[tuple[np.ndarray, np.ndarray | None]]:
    """``values`` and ``weights`` in views of at most :data:`CACHE_ROWS` rows."""
    n = values.shape[0]
    if n <= CACHE_ROWS:
        yield values, weights
        return
    for start in range(0, n, CACHE_ROWS):
        stop = start + CACHE_ROWS
        yield values[start:stop], None if weights is None else weights[start:stop]


def row_slices(chunk):
    """``(values, weights, clusters)`` of a chunk in slices of :data:`PASS2_ROWS` rows."""
    n = chunk.values.shape[0]
    if n <= PASS2_ROWS:
        yield chunk.values, chunk.weights, chunk.clusters
        return
    for start in range(0, n, PASS2_ROWS):
        part = slice(start, start + PASS2_ROWS)
        yield (chunk.values[part], None if chunk.weights is None else chunk.weights[part],
               None if chunk.clusters is None else chunk.clusters[part])


def _block_scores(left: np.ndarray, right: np.ndarray, size: int,
                  weights: np.ndarray | None, out: np.ndarray) -> np.ndarray:
    if right.shape[1] == 1:
        np.multiply(left, right, out=out)
    elif left.shape[1] == 1:
        np.multiply(right, left, out=out)
    else:
        for j in range(left.shape[1]):
            np.multiply(left[:, j:j + 1], right, out=out[:, j * right.shape[1]:
                                                         (j + 1) * right.shape[1]])
    if weights is not None:
        out *= weights[:, None]
    return out


def _residual_unit(residuals: list[np.ndarray], column: np.ndarray, *, add: bool
                   ) -> int | None:
    """The unit of the residual ``column`` among ``residuals`` (added when ``add``)."""
    for j, known in enumerate(residuals):
        if np.array_equal(known, column):
            return j
    if not add:
        return None
    residuals.append(column)
    return len(residuals) - 1


class ScoreRows:
    """The units of pass 2 for a list of blocks: per chunk, :meth:`rows` gives one array per
    unit; sums of their outer products (or per-cluster sums) turn into the blocks' meats (or
    per-cluster score sums) by :meth:`meats` (or :meth:`sums`)."""

    def __init__(self, blocks: Sequence, mean: np.ndarray) -> None:
        self._mean = mean
        width = mean.size + 1
        residuals: list[np.ndarray] = []
        routes: dict[str, tuple[int, np.ndarray | None]] = {}
        # Wide one-residual blocks get the residual-weighted rows of their residual ...
        for b in blocks:
            if b.right.shape[1] == 1 and NARROW_SHARE * b.left.shape[1] >= width:
                routes[b.name] = (_residual_unit(residuals, b.right[:, 0], add=True), b.left)
        # ... which narrow blocks with the same residual share.
        for b in blocks:
            if b.name not in routes and b.right.shape[1] == 1:
                unit = _residual_unit(residuals, b.right[:, 0], add=False)
                if unit is not None:
                    routes[b.name] = (unit, b.left)
        bases = self._product_routes(blocks, routes, len(residuals))
        self._direct = [b for b in blocks if b.name not in routes]
        for j, b in enumerate(self._direct):
            routes[b.name] = (len(residuals) + len(bases) + j, None)
        # Each residual unit keeps the columns of the centred row that some of its blocks' L
        # reads (the outcome's never: a score is a residual times instruments or regressors).
        self._supports = [_support([left for unit, left in routes.values() if unit == j])
                          for j in range(len(residuals))]
        for name, (unit, left) in routes.items():
            if unit < len(residuals):
                routes[name] = (unit, left[self._supports[unit]])
        self._runs = [_runs(support) for support in self._supports]
        self._routes = [(b.name, *routes[b.name]) for b in blocks]
        self._residual_map = (np.column_stack(residuals) if residuals
                              else np.zeros((width, 0)))
        self._direct_maps = _DirectMaps(self._direct, mean) if self._direct else None
        self._bases = [(v[1:], v[0] - mean @ v[1:]) for v in bases]
        self.widths = ([len(support) for support in self._supports]
                       + [distinct_count(v.shape[1]) for v in bases]
                       + [b.size for b in self._direct])
        self._buffers: dict[tuple, np.ndarray] = {}

    def rows(self, values: np.ndarray, weights: np.ndarray | None) -> list[np.ndarray]:
        """One ``(rows, width)`` array per unit for a chunk's ``values``.

        The arrays are scratch space that the next call overwrites: sum them before asking
        for the next chunk's (fresh arrays of this size cost page faults at every chunk,
        which took three times the arithmetic)."""
        out = []
        n = values.shape[0]
        n_residuals = self._residual_map.shape[1]
        if n_residuals:  # the centred rows [1, v − μ] once, each unit's h a scaling of them
            centred = self._scratch("centred", n, values.shape[1] + 1)
            centred[:, 0] = 1.0
            np.subtract(values, self._mean, out=centred[:, 1:])
            e = np.matmul(centred, self._residual_map, out=self._scratch("e", n, n_residuals))
            if weights is not None:
                e *= weights[:, None]
            for j in range(n_residuals):
                h = self._scratch(("h", j), n, len(self._supports[j]))
                for source, target in self._runs[j]:
                    np.multiply(centred[:, source], e[:, j:j + 1], out=h[:, target])
                out.append(h)
        for j, (v_map, v_offset) in enumerate(self._bases):
            v = np.matmul(values, v_map, out=self._scratch(("v", j), n, v_map.shape[1]))
            v += v_offset
            scaled = self._scratch(("vw", j), n, v_map.shape[1])
            out.append(products(v, weights, scaled,
                                self._scratch(("u", j), n, distinct_count(v_map.shape[1]))))
        if self._direct_maps is not None:
            mapped = self._direct_maps.apply(values, self._scratch("mapped", n,
                                                                   self._direct_maps.width))
            for j, (b, (a, e)) in enumerate(zip(self._direct, mapped)):
                g = self._scratch(("g", j), n, b.size)
                out.append(_block_scores(a, e, b.size, weights, g))
        return out

    @staticmethod
    def _product_routes(blocks: Sequence, routes: dict, first: int) -> list[np.ndarray]:
        """Route each block with a worthwhile basis to the distinct products of its basis
        (blocks with the same basis share them); the distinct bases, in unit order."""
        bases: list[np.ndarray] = []
        for b in blocks:
            basis = getattr(b, "basis", None)
            if b.name in routes or basis is None or distinct_count(basis[0].shape[1]) >= b.size:
                continue
            unit = next((j for j, known in enumerate(bases) if np.array_equal(known, basis[0])),
                        None)
            if unit is None:
                bases.append(basis[0])
                unit = len(bases) - 1
            routes[b.name] = (first + unit, fold(basis[1], basis[2]))
        return bases

    def _scratch(self, tag, rows: int, columns: int) -> np.ndarray:
        key = (tag, rows, columns)
        if key not in self._buffers:
            if len(self._buffers) > MAX_BUFFERS:
                self._buffers.clear()
            self._buffers[key] = np.empty((rows, columns), order="F")
        return self._buffers[key]

    def meats(self, outer: Sequence[np.ndarray]) -> dict[str, np.ndarray]:
        """Each block's ``Σ gᵢgᵢ'`` from each unit's ``Σ hᵢ'hᵢ`` (or ``Σ_g S_g'S_g``)."""
        found = {}
        for name, unit, left in self._routes:
            meat = outer[unit] if left is None else left.T @ outer[unit] @ left
            found[name] = 0.5 * (meat + meat.T)
        return found

    def sums(self, per_cluster: Sequence[np.ndarray]) -> dict[str, np.ndarray]:
        """Each block's per-cluster score sums from each unit's per-cluster row sums."""
        return {name: per_cluster[unit] if left is None else per_cluster[unit] @ left
                for name, unit, left in self._routes}


def _support(maps: Sequence[np.ndarray]) -> np.ndarray:
    """Rows of the centred row that some of ``maps`` reads (all of them if none does)."""
    used = np.zeros(maps[0].shape[0], dtype=bool)
    for m in maps:
        used |= np.any(m != 0, axis=1)
    return np.flatnonzero(used) if used.any() else np.arange(used.size)


def _runs(support: np.ndarray) -> list[tuple[slice, slice]]:
    """``support`` as contiguous runs: (columns of the centred row, columns of the unit's)."""
    breaks = np.flatnonzero(np.diff(support) != 1) + 1
    starts, stops = np.r_[0, breaks], np.r_[breaks, support.size]
    return [(slice(int(support[a]), int(support[b - 1]) + 1), slice(int(a), int(b)))
            for a, b in zip(starts, stops)]


class _DirectMaps:
    """The direct blocks' row maps applied in one product per chunk.

    ``d̃ @ L = values @ L[1:] + (L[0] − μ @ L[1:])``, so the augmented rows are never formed.
    """

    def __init__(self, blocks: Sequence, mean: np.ndarray) -> None:
        maps = [m for b in blocks for m in (b.left, b.right)]
        stack = np.hstack(maps)
        # Stored transposed: (maps × columns) @ (columns × rows) is faster in BLAS than a
        # tall-skinny (rows × columns) @ (columns × maps) product, and yields column-major
        # per-map columns that the elementwise products read contiguously.
        self._stack_t = np.ascontiguousarray(stack[1:].T)
        self._offset = stack[0] - mean @ stack[1:]
        edges = np.cumsum([0, *(m.shape[1] for m in maps)])
        self._slices = [(slice(edges[2 * i], edges[2 * i + 1]),
                         slice(edges[2 * i + 1], edges[2 * i + 2])) for i in range(len(blocks))]

    @property
    def width(self) -> int:
        return self._stack_t.shape[0]

    def apply(self, values: np.ndarray, out: np.ndarray) -> list[tuple[np.ndarray, np.ndarray]]:
        """The maps of ``values`` into ``out`` (column-major, ``rows × width``)."""
        np.matmul(self._stack_t, values.T, out=out.T)
        mapped = out
        mapped += self._offset
        return [(mapped[:, left], mapped[:, right]) for left, right in self._slices]
