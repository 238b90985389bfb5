r"""Per-cluster moment matrices: the cluster score sums of pass 2 without a second read.

Every score of a :class:`~sensiv.estimation.moments.ScoreBlock` is bilinear in the augmented
centred row ``d̃ = [1, v − shift]``: ``gᵢ = wᵢ vec(aᵢ ⊗ eᵢ)`` with ``a = d̃ @ left`` and
``e = d̃ @ right``.  Its sum over a cluster is therefore a map of that cluster's moment matrix

.. math::

    s_g = \operatorname{vec}(\text{left}' M_g\, \text{right}),
    \qquad M_g = \sum_{i \in g} w_i\, \tilde d_i \tilde d_i',

so pass 1 can gather ``M_g`` for every cluster (one-way clustering) while it reads the rows,
and pass 2's cluster sums follow for any blocks without reading the data again (exact algebra,
common practice, no source).  The matrices are gathered about a fixed shift (the first chunk's
means); pass 2 moves the maps to it (:func:`recentred`), and partial sums with different
shifts are moved to one before they add (:func:`shifted`).

Memory grows with the clusters: ``G · (1+p)²`` numbers.  Past :data:`MAX_ENTRIES` the
gathering stops and pass 2 reads the data as before.  Every engine keeps the last source's
matrices with :func:`remember`; pass 2 asks :func:`recall` for them.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass

import numpy as np

from sensiv.estimation.blas_threads import gram
from sensiv.estimation.label_codes import LabelCodes
from sensiv.estimation.moments import ScoreBlock

MAX_ENTRIES = 10_000_000
"""Largest ``G · (1+p)²`` gathered (80 MB of float64)."""

LOOP_ROWS = 32
"""Rows a cluster of a chunk has on average from which its matrix is one matrix product
(below, the per-row products summed by a sparse indicator are cheaper)."""

BUFFER_ENTRIES = 2_000_000
"""Products formed at a time (rows × entries a row; 16 MB)."""


@dataclass(frozen=True, slots=True)
class ClusterMoments:
    """Moment matrices of the clean rows per cluster: ``labels`` (order of first appearance),
    ``matrices`` ``(G, 1+p, 1+p)`` about ``shift``."""

    labels: list
    shift: np.ndarray
    matrices: np.ndarray


def small_codes(codes: np.ndarray) -> np.ndarray:
    """Cluster codes as 16-bit integers where they fit: numpy's stable sort of 16-bit
    integers is a radix sort, 4× faster than its merge sort of 64-bit ones on a chunk of
    65,536 rows (measured), with the same order (a stable sort has one answer)."""
    if codes.size and int(codes.max()) <= np.iinfo(np.uint16).max:
        return codes.astype(np.uint16)
    return codes


class Gatherer:
    """Adds chunks' rows to their clusters' moment matrices; :attr:`full` once the clusters
    would need more than :data:`MAX_ENTRIES` numbers (then nothing more is kept)."""

    def __init__(self, width: int) -> None:
        self.width = width
        self.shift: np.ndarray | None = None
        self.codes = LabelCodes()
        self.rows, self.cols = np.triu_indices(width + 1)
        self.sums = np.zeros((0, width + 1, width + 1))
        self.full = False

    def add(self, values: np.ndarray, weights: np.ndarray | None, clusters: np.ndarray) -> None:
        if self.full or values.shape[0] == 0:
            return
        import scipy.sparse as sp

        if self.shift is None:
            self.shift = values.mean(axis=0)
        codes, n_groups, n_here = self.codes.encode_counted(clusters)
        if n_groups * (self.width + 1) ** 2 > MAX_ENTRIES:
            self.full, self.sums = True, np.zeros((0, self.width + 1, self.width + 1))
            return
        if self.sums.shape[0] < n_groups:
            grown = np.zeros((n_groups, self.width + 1, self.width + 1))
            grown[:self.sums.shape[0]] = self.sums
            self.sums = grown
        if values.shape[0] >= LOOP_ROWS * n_here:
            self._by_cluster(values, weights, codes)
            return
        step = max(1, BUFFER_ENTRIES // len(self.rows))
        for start in range(0, values.shape[0], step):
            stop = min(start + step, values.shape[0])
            augmented = np.empty((stop - start, self.width + 1))
            augmented[:, 0] = 1.0
            np.subtract(values[start:stop], self.shift, out=augmented[:, 1:])
            products = self._products(augmented)
            w = np.ones(stop - start) if weights is None else weights[start:stop]
            indicator = sp.csr_matrix((w, (codes[start:stop], np.arange(stop - start))),
                                      shape=(n_groups, stop - start))
            upper = indicator @ products
            self.sums[:, self.rows, self.cols] += upper
            off = self.rows != self.cols
            self.sums[:, self.cols[off], self.rows[off]] += upper[:, off]

    def _by_cluster(self, values: np.ndarray, weights: np.ndarray | None,
                    codes: np.ndarray) -> None:
        """Large clusters: sort the rows by cluster and form each cluster's ``X_g' W X_g``
        with one matrix product (fewer operations than the per-row products)."""
        order = np.argsort(small_codes(codes), kind="stable")
        sorted_codes = codes[order]
        starts = np.flatnonzero(np.r_[True, sorted_codes[1:] != sorted_codes[:-1]])
        ends = np.r_[starts[1:], len(order)]
        x = np.empty((len(order), self.width + 1), order="F")
        x[:, 0] = 1.0
        for j in range(self.width):         # column by column: a row gather is slow in F order
            np.take(values[:, j], order, out=x[:, j + 1])
            x[:, j + 1] -= self.shift[j]
        if weights is not None:
            x *= np.sqrt(weights[order])[:, None]
        for a, b in zip(starts.tolist(), ends.tolist()):
            self.sums[sorted_codes[a]] += gram(x[a:b])

    def _products(self, x: np.ndarray) -> np.ndarray:
        """``x[:, i] · x[:, j]`` for ``i ≤ j`` (upper triangle, row-major)."""
        out = np.empty((x.shape[0], len(self.rows)))
        at = 0
        for i in range(x.shape[1]):
            width = x.shape[1] - i
            np.multiply(x[:, i:i + 1], x[:, i:], out=out[:, at:at + width])
            at += width
        return out

    def result(self) -> ClusterMoments | None:
        """The gathered matrices, or ``None`` when :attr:`full` or no row came."""
        if self.full or self.shift is None:
            return None
        return ClusterMoments(self.codes.labels(), self.shift,
                              0.5 * (self.sums + self.sums.transpose(0, 2, 1)))


def symmetric(upper: np.ndarray, size: int) -> np.ndarray:
    """``(G, size, size)`` symmetric matrices from their upper triangles (row-major)."""
    rows, cols = np.triu_indices(size)
    out = np.zeros((upper.shape[0], size, size))
    out[:, rows, cols] = upper
    return out + np.triu(out, 1).transpose(0, 2, 1)


def shifted(moments: ClusterMoments, shift: np.ndarray) -> ClusterMoments:
    """The same matrices about another shift: ``[1, v − s'] = T [1, v − s]``, ``M' = T M T'``."""
    size = moments.matrices.shape[1]
    t = np.eye(size)
    t[1:, 0] = moments.shift - shift
    matrices = np.einsum("ab,gbc,dc->gad", t, moments.matrices, t, optimize=True)
    return ClusterMoments(moments.labels, shift, matrices)


def merged(left: ClusterMoments | None, right: ClusterMoments | None) -> ClusterMoments | None:
    """Two partial gatherings over disjoint rows added cluster by cluster (``None`` when
    either gave up: the whole must then read the data in pass 2)."""
    if left is None or right is None:
        return None
    right = shifted(right, left.shift)
    codes = LabelCodes()
    a, n = codes.encode(np.asarray(left.labels, dtype=object))
    b, n = codes.encode(np.asarray(right.labels, dtype=object))
    out = np.zeros((n, *left.matrices.shape[1:]))
    out[a] += left.matrices
    out[b] += right.matrices
    return ClusterMoments(codes.labels(), left.shift, out)


def recentred(blocks: Sequence[ScoreBlock], delta: np.ndarray) -> list[ScoreBlock]:
    """The blocks' maps for rows centred at the shift instead of the mean (``delta = mean −
    shift``): ``[1, d − δ] = T [1, d]``, so each map becomes ``T' @ map``."""
    out = []
    for block in blocks:
        left, right = (np.vstack([m[:1] - delta @ m[1:], m[1:]])
                       for m in (block.left, block.right))
        out.append(ScoreBlock(block.name, left, right))
    return out


def cluster_scores(matrices: np.ndarray, blocks: Sequence[ScoreBlock]) -> dict[str, np.ndarray]:
    """Per-cluster score sums ``vec(left' M_g right)`` (``a`` varying slowest) of each block."""
    return {b.name: np.einsum("ak,gab,bl->gkl", b.left, matrices, b.right,
                              optimize=True).reshape(len(matrices), -1) for b in blocks}


def scores_from(moments: ClusterMoments, mean: np.ndarray, blocks: Sequence[ScoreBlock]
                ) -> dict[str, np.ndarray]:
    """Per-cluster score sums of the blocks, whose maps are for rows centred at ``mean``."""
    return cluster_scores(moments.matrices, recentred(blocks, mean - moments.shift))


def gathering(chunks: Iterable, gatherer: Gatherer) -> Iterator:
    """The chunks as they are, each also added to ``gatherer`` (which gives up on a chunk
    without one column of cluster labels)."""
    for chunk in chunks:
        if chunk.clusters is None or np.ndim(chunk.clusters) != 1:
            gatherer.full = True
        else:
            gatherer.add(chunk.values, chunk.weights, chunk.clusters)
        yield chunk


_LAST: dict[int, tuple[object, ClusterMoments]] = {}


def remember(source, moments: ClusterMoments | None) -> None:
    """Keep ``moments`` as ``source``'s (only the last source's are kept)."""
    _LAST.clear()
    if moments is not None:
        _LAST[id(source)] = (source, moments)


def recall(source, width: int) -> ClusterMoments | None:
    """The matrices pass 1 gathered over ``source``'s rows (``width`` columns), if any."""
    kept = _LAST.get(id(source))
    if kept is None or kept[0] is not source or kept[1].matrices.shape[1] != width + 1:
        return None
    return kept[1]
