"""Cross-product moments and per-row score sums: the only layer that touches rows.

Everything downstream (2SLS, diagnostics, sensitivity bounds) is computed from two passes:

* **Pass 1** — :func:`accumulate` returns :class:`Moments`: the weighted mean ``μ`` and the
  centred co-moment matrix ``C = Σ wᵢ (dᵢ − μ)(dᵢ − μ)'`` of the data columns
  ``d = [y, X, Z, W]``.  Chunks are combined exactly with the pairwise update of Chan, Golub &
  LeVeque (1979), so a file read in pieces gives the same moments as the whole frame.
* **Pass 2** — :func:`score_sums` evaluates, for linear maps fixed after pass 1, per-row score
  vectors ``gᵢ = wᵢ · vec(aᵢ ⊗ eᵢ)`` (``aᵢ``: regressors or instruments, ``eᵢ``: residuals) and
  returns ``Σ gᵢgᵢ'`` (heteroskedasticity-robust) or ``Σ_g s_g s_g'`` with cluster sums ``s_g``.

All linear maps act on the *augmented centred row* ``d̃ᵢ = [1, dᵢ − μ]``; in those
coordinates the weighted cross-product matrix is block diagonal, ``M = diag(Σw, C)``, which
keeps columns with a large mean (a calendar year, incomes in cents) well conditioned.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass

import numpy as np

from sensiv.core.errors import InputError
from sensiv.estimation.blas_threads import gram
from sensiv.estimation.parallel import ordered_map
from sensiv.estimation.label_codes import LabelCodes
from sensiv.estimation.score_rows import ScoreRows, cache_blocks, row_slices


@dataclass(frozen=True, slots=True)
class Moments:
    """Weighted first and centred second moments of the data columns.

    Attributes
    ----------
    columns : tuple of str
        Names of the ``p`` data columns (outcome, treatments, instruments, controls).
    n : int
        Rows used.
    n_dropped : int
        Rows dropped listwise for a missing value.
    weight_sum : float
        ``Σ wᵢ`` (equals ``n`` without weights).
    mean : ndarray, shape (p,)
        Weighted means ``μ``.
    comoment : ndarray, shape (p, p)
        ``Σ wᵢ (dᵢ − μ)(dᵢ − μ)'``.
    n_filtered : int
        Rows removed by the row filter before listwise deletion.
    """

    columns: tuple[str, ...]
    n: int
    n_dropped: int
    weight_sum: float
    mean: np.ndarray
    comoment: np.ndarray
    n_filtered: int = 0

    def __add__(self, other: Moments) -> Moments:
        """Combine the moments of two disjoint sets of rows (Chan, Golub & LeVeque 1979)."""
        if self.columns != other.columns:
            raise ValueError("cannot add moments of different columns")
        filtered = self.n_filtered + other.n_filtered
        if other.n == 0:
            return Moments(self.columns, self.n, self.n_dropped + other.n_dropped,
                           self.weight_sum, self.mean, self.comoment, filtered)
        if self.n == 0:
            return Moments(other.columns, other.n, self.n_dropped + other.n_dropped,
                           other.weight_sum, other.mean, other.comoment, filtered)
        total = self.weight_sum + other.weight_sum
        delta = other.mean - self.mean
        mean = self.mean + delta * (other.weight_sum / total)
        comoment = (self.comoment + other.comoment
                    + np.outer(delta, delta) * (self.weight_sum * other.weight_sum / total))
        return Moments(self.columns, self.n + other.n, self.n_dropped + other.n_dropped,
                       total, mean, comoment, filtered)

    @property
    def augmented(self) -> np.ndarray:
        """``M = Σ wᵢ d̃ᵢ d̃ᵢ'`` for ``d̃ᵢ = [1, dᵢ − μ]``: ``diag(Σw, C)``, shape (1+p, 1+p)."""
        p = len(self.columns)
        out = np.zeros((p + 1, p + 1))
        out[0, 0] = self.weight_sum
        out[1:, 1:] = self.comoment
        return out

    def variance(self, column: str) -> float:
        """Weighted variance (divisor ``Σw``) of one column."""
        j = self.columns.index(column)
        return float(self.comoment[j, j] / self.weight_sum)

    def relative_difference(self, other: Moments) -> float:
        """Largest relative difference of means and co-moments (for consistency checks)."""
        scale_m = np.maximum(np.abs(self.mean), np.sqrt(np.diag(self.comoment) / self.weight_sum))
        scale_m = np.where(scale_m > 0, scale_m, 1.0)
        d_mean = np.max(np.abs(self.mean - other.mean) / scale_m)
        sd = np.sqrt(np.diag(self.comoment))
        sd = np.where(sd > 0, sd, 1.0)
        d_com = np.max(np.abs(self.comoment - other.comoment) / np.outer(sd, sd))
        d_w = abs(self.weight_sum - other.weight_sum) / self.weight_sum
        return float(max(d_mean, d_com, d_w))


BLOCK_ROWS = 8192
"""Rows pass 1 centres at a time (``8192 × p`` numbers stay in a core's cache for p ≲ 15)."""


def empty_moments(columns: Sequence[str]) -> Moments:
    """Moments of zero rows (the identity of ``+``)."""
    p = len(columns)
    return Moments(tuple(columns), 0, 0, 0.0, np.zeros(p), np.zeros((p, p)))


def chunk_moments(columns: Sequence[str], values: np.ndarray, weights: np.ndarray | None,
                  n_dropped: int = 0, n_filtered: int = 0,
                  scratch: np.ndarray | None = None) -> Moments:
    """Moments of one block of rows, by the two-pass (mean, then centred product) formula.

    Parameters
    ----------
    columns : sequence of str
        Column names, ``p`` of them.
    values : ndarray, shape (n, p)
        Finite data.
    weights : ndarray, shape (n,), or None
        Positive analytic weights.
    n_dropped : int
        Rows of this block dropped before ``values`` was formed (carried along for reporting).
    n_filtered : int
        Rows of this block removed by the row filter (carried along for reporting).
    scratch : ndarray, shape (BLOCK_ROWS, p), optional
        Space for a centred block, reused across chunks (a fresh one costs page faults).

    Examples
    --------
    >>> import numpy as np
    >>> m = chunk_moments(["a"], np.array([[1.0], [3.0]]), None)
    >>> float(m.mean[0]), float(m.comoment[0, 0])
    (2.0, 2.0)
    """
    n, p = values.shape
    if n == 0:
        out = empty_moments(columns)
        return Moments(out.columns, 0, n_dropped, 0.0, out.mean, out.comoment, n_filtered)
    # Shift by the first row before summing, so that a column whose mean dwarfs its spread
    # (a calendar year, incomes in cents) is accumulated as small deviations: the mean is then
    # accurate to rounding of the spread, not of the level.  Both sweeps work on blocks of
    # BLOCK_ROWS rows, centred into scratch space that stays in the processor's cache (a
    # centred copy of the whole chunk went to memory and back three times).
    shift = values[0].copy()
    rows = min(n, BLOCK_ROWS)
    if scratch is None or scratch.shape[0] < rows or scratch.shape[1] != p:
        scratch = np.empty((rows, p), order="F")
    blocks = [slice(start, min(start + BLOCK_ROWS, n)) for start in range(0, n, BLOCK_ROWS)]
    total = float(n) if weights is None else float(weights.sum())
    sums = np.zeros(p)
    for part in blocks:
        centred = np.subtract(values[part], shift, out=scratch[:part.stop - part.start])
        sums += centred.sum(axis=0) if weights is None else weights[part] @ centred
    offset = sums / total
    comoment = np.zeros((p, p))
    weighted = None if weights is None else np.empty_like(scratch)
    for part in blocks:
        m = part.stop - part.start
        centred = np.subtract(values[part], shift, out=scratch[:m])
        centred -= offset
        if weights is None:
            comoment += gram(centred)
        else:
            comoment += np.dot(np.multiply(centred, weights[part, None], out=weighted[:m]).T,
                               centred)
    mean = shift + offset
    comoment = 0.5 * (comoment + comoment.T)
    return Moments(tuple(columns), n, n_dropped, total, mean, comoment, n_filtered)


def accumulate(chunks: Iterable, columns: Sequence[str]) -> Moments:
    """Pass 1: moments of every chunk (objects with ``values``, ``weights``, ``n_dropped``), summed."""
    def one(scratch: dict, chunk) -> Moments:
        p = chunk.values.shape[1]
        if scratch.get("p") != p:  # one scratch block per thread
            scratch["p"], scratch["array"] = p, np.empty((BLOCK_ROWS, p), order="F")
        return chunk_moments(columns, chunk.values, chunk.weights, chunk.n_dropped,
                             getattr(chunk, "n_filtered", 0), scratch["array"])

    total = empty_moments(columns)
    for part in ordered_map(one, chunks, dict):
        total = total + part
    return total


@dataclass(frozen=True, slots=True)
class ScoreBlock:
    """A request for one sum of score outer products in pass 2.

    Per row, ``aᵢ = d̃ᵢ @ left`` and ``eᵢ = d̃ᵢ @ right``; the score is
    ``gᵢ = wᵢ · vec(aᵢ ⊗ eᵢ)`` with ``aᵢ`` varying slowest.

    Attributes
    ----------
    name : str
    left : ndarray, shape (1+p, k_a)
    right : ndarray, shape (1+p, k_e)
    basis : (V, A, B) or None
        The same maps in a smaller basis, ``d̃V A = d̃ left`` and ``d̃V B = d̃ right`` over
        the rows (built and checked by :func:`sensiv.estimation.score_basis.in_basis`): the
        numpy kernels then sum the distinct products of ``v = d̃V`` instead of the scores.
    """

    name: str
    left: np.ndarray
    right: np.ndarray
    basis: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None

    @property
    def size(self) -> int:
        return self.left.shape[1] * self.right.shape[1]


@dataclass(frozen=True, slots=True)
class ScoreSums:
    """Result of pass 2: one ``(size, size)`` matrix per requested block.

    ``n_clusters`` is the number of distinct cluster labels (``None`` for robust sums).  For
    two-way clustering ``meats`` holds ``M_A + M_B − M_{A∩B}`` (Cameron, Gelbach & Miller
    2011), ``n_clusters`` the smaller of ``G_A`` and ``G_B``, ``cluster_counts`` the three
    ``(G_A, G_B, G_{A∩B})`` and ``parts`` the three one-way meats (sign, meats, groups) that
    :func:`sensiv.estimation.covariance.combine_two_way` rescales and repairs; ``psd_fix``
    says whether that repair clipped a negative eigenvalue.
    """

    meats: dict[str, np.ndarray]
    n_clusters: int | None
    cluster_counts: tuple[int, ...] = ()
    parts: tuple[tuple[int, dict[str, np.ndarray], int], ...] = ()
    psd_fix: bool = False




def score_sums(chunks: Iterable, mean: np.ndarray, blocks: Sequence[ScoreBlock],
               cluster: bool) -> ScoreSums:
    """Pass 2: robust or cluster sums of score outer products for every block.

    Parameters
    ----------
    chunks : iterable of chunks
        The same rows as in pass 1 (objects with ``values``, ``weights``, ``clusters``).
    mean : ndarray, shape (p,)
        ``Moments.mean`` from pass 1, defining the augmented centred rows.
    blocks : sequence of ScoreBlock
    cluster : bool
        Sum scores within clusters first when true: one-way when the chunks' ``clusters``
        are one column, two-way (``A``, ``B`` and their pairs) when they are two.

    Returns
    -------
    ScoreSums
        ``Σ gᵢgᵢ'`` or ``Σ_g s_g s_g'`` per block.
    """
    rows = ScoreRows(blocks, mean)
    if not cluster:
        def one(local: ScoreRows, chunk) -> list[np.ndarray]:
            part = [np.zeros((w, w)) for w in local.widths]
            for values, weights in cache_blocks(chunk.values, chunk.weights):
                for acc, h in zip(part, local.rows(values, weights)):
                    acc += gram(h)
            return part

        outer = [np.zeros((w, w)) for w in rows.widths]
        for part in ordered_map(one, chunks, lambda: ScoreRows(blocks, mean)):
            for acc, add in zip(outer, part):
                acc += add
        return ScoreSums(rows.meats(outer), None)

    indices: list[LabelCodes] = []
    sums: list[list[np.ndarray]] = []
    for chunk in chunks:
        if chunk.clusters is None:
            raise ValueError("cluster sums requested but the chunks carry no cluster labels")
        if not indices:
            ways = 3 if np.ndim(chunk.clusters) == 2 else 1
            indices = [LabelCodes() for _ in range(ways)]
            sums = [[np.zeros((0, w)) for w in rows.widths] for _ in range(ways)]
        for values, weights, labels in row_slices(chunk):
            unit_rows = rows.rows(values, weights)
            for (codes, n_groups), acc in zip(_encode_ways(indices, labels), sums):
                for u, h in enumerate(unit_rows):
                    acc[u] = _add_by_code(acc[u], codes, n_groups, h)
    if not sums:  # no chunk at all
        return ScoreSums({b.name: np.zeros((b.size, b.size)) for b in blocks}, 0)
    outer = [rows.meats([s.T @ s for s in acc]) for acc in sums]
    if len(outer) == 1:
        return ScoreSums(outer[0], len(indices[0]))
    counts = tuple(len(index) for index in indices)
    combined = {b.name: outer[0][b.name] + outer[1][b.name] - outer[2][b.name] for b in blocks}
    parts = tuple(zip((1, 1, -1), outer, counts))
    return ScoreSums(combined, min(counts[:2]), counts, parts)


def _add_by_code(acc: np.ndarray, codes: np.ndarray, n_groups: int, g: np.ndarray) -> np.ndarray:
    """``acc`` (grown to ``n_groups`` rows) plus the rows of ``g`` summed by cluster code."""
    if acc.shape[0] < n_groups:
        acc = np.vstack([acc, np.zeros((n_groups - acc.shape[0], g.shape[1]))])
    for j in range(g.shape[1]):
        acc[:, j] += np.bincount(codes, weights=g[:, j], minlength=n_groups)
    return acc


def _encode_ways(indices: list[LabelCodes], labels: np.ndarray) -> list[tuple[np.ndarray, int]]:
    """Codes of one chunk for each way: one-way, or ``A``, ``B`` and the pair ``A∩B``."""
    if len(indices) == 1:
        return [indices[0].encode(labels)]
    a, n_a = indices[0].encode(labels[:, 0])
    b, n_b = indices[1].encode(labels[:, 1])
    pair = indices[2].encode(a * np.int64(2**32) + b)
    return [(a, n_a), (b, n_b), pair]


def cluster_score_sums(chunks: Iterable, mean: np.ndarray, blocks: Sequence[ScoreBlock]
                       ) -> tuple[list, dict[str, np.ndarray]]:
    """Per-cluster score sums ``s_g``: the cluster labels in order of first appearance and,
    per block, an array ``(len(labels), size)``.  Sums over disjoint rows add by label, so
    partitions can be summed apart and merged (a group-by sum)."""
    rows = ScoreRows(blocks, mean)
    index = LabelCodes()
    sums = [np.zeros((0, w)) for w in rows.widths]
    for chunk in chunks:
        if chunk.clusters is None:
            raise ValueError("cluster sums requested but the chunks carry no cluster labels")
        for values, weights, labels in row_slices(chunk):
            codes, n_groups = index.encode(labels)
            for u, h in enumerate(rows.rows(values, weights)):
                sums[u] = _add_by_code(sums[u], codes, n_groups, h)
    if not len(index):
        return [], {b.name: np.zeros((0, b.size)) for b in blocks}
    return index.labels(), rows.sums(sums)


def cluster_sums(chunks: Iterable, mean: np.ndarray, block: ScoreBlock) -> np.ndarray:
    """Per-cluster sums ``s_g = Σ_{i∈g} wᵢ vec(aᵢ ⊗ eᵢ)`` of one block, shape ``(G, size)``.

    Rows of the result follow the clusters' order of first appearance; the chunks must carry
    one column of cluster labels.  The wild cluster bootstrap
    (:mod:`sensiv.estimation.wild_bootstrap`) needs these sums themselves, not only
    ``Σ_g s_g s_g'``."""
    return cluster_score_sums(chunks, mean, [block])[1][block.name]


def check_rows(moments: Moments, n_parameters: int) -> None:
    """Raise :class:`InputError` unless there are more rows than parameters."""
    if moments.n <= n_parameters:
        raise InputError(
            f"only {moments.n} usable rows (after dropping {moments.n_dropped} with missing "
            f"values) for {n_parameters} parameters; 2SLS needs more rows than parameters: "
            "supply more data or use fewer controls")
