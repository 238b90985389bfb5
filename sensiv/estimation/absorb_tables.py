"""Pass 0 of two absorbed fixed effects on a streamed file: per-level and per-pair sums of
every column (memory grows with the levels and their distinct pairs, not the rows), and the
singletons dropped from those tables alone (see :mod:`sensiv.estimation.absorb_streamed`)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sensiv.data.source import Chunk
from sensiv.estimation import absorb as fe
from sensiv.estimation.absorb_view import LevelCodes
from sensiv.estimation.moments import BLOCK_ROWS, Moments, chunk_moments, empty_moments


@dataclass
class Tables:
    """What pass 0 gathers (per fixed effect ``k``: ``counts[k]``, ``totals[k]``, ``sums[k]``)."""

    codes: tuple[LevelCodes, LevelCodes]
    counts: list
    totals: list
    sums: list
    pairs: LevelCodes  # the pairs of levels met: (code of the first << 32) | code of the second
    pair_rows: np.ndarray | None
    pair_weights: np.ndarray | None  # None without weights (the rows then)
    raw: Moments
    shift: np.ndarray | None = None
    chunks: int = 0
    keys: np.ndarray | None = None  # the pairs' keys in the order of their codes (at the end)

    @classmethod
    def empty(cls, columns) -> Tables:
        return cls((LevelCodes(), LevelCodes()), [None, None], [None, None], [None, None],
                   LevelCodes(), None, None, empty_moments(columns))

    def finish(self) -> None:
        """The spare rows of the doubled tables cut off; the pairs' keys as one array."""
        for k in range(2):
            n = len(self.codes[k].labels())
            if self.counts[k] is not None:
                self.counts[k], self.totals[k] = self.counts[k][:n], self.totals[k][:n]
                self.sums[k] = self.sums[k][:n]
        self.keys = np.asarray(self.pairs.labels(), dtype=np.int64)
        size = self.keys.size
        self.pair_rows = np.zeros(0) if self.pair_rows is None else self.pair_rows[:size]
        self.pair_weights = (self.pair_rows if self.pair_weights is None
                             else self.pair_weights[:size])


def _grown(array: np.ndarray | None, size: int, width: int | None = None) -> np.ndarray:
    """``array`` with room for ``size`` levels: doubled when it grows, so that levels met
    chunk after chunk cost amortised constant copying (the spare rows stay 0: no rows)."""
    tail = () if width is None else (width,)
    if array is None:
        return np.zeros((size,) + tail)
    if array.shape[0] >= size:
        return array
    grown = np.zeros((max(size, 2 * array.shape[0]),) + tail)
    grown[:array.shape[0]] = array
    return grown


def _add_chunk(t: Tables, chunk: Chunk) -> None:
    values, weights = chunk.values, chunk.weights
    if t.shift is None:
        t.shift = values[0].copy()
    codes = []
    for k in range(2):
        c, n = t.codes[k].encode(chunk.groups[k])
        codes.append(c)
        t.counts[k] = _grown(t.counts[k], n)
        t.totals[k] = _grown(t.totals[k], n)
        t.sums[k] = _grown(t.sums[k], n, values.shape[1])
        t.counts[k][:n] += np.bincount(c, minlength=n)
        t.totals[k][:n] += fe.group_weights(c, n, weights)
    shifted = values - t.shift
    w_values = shifted if weights is None else shifted * weights[:, None]
    for k in range(2):
        n = len(t.codes[k].labels())
        for j in range(values.shape[1]):
            t.sums[k][:n, j] += np.bincount(codes[k], weights=w_values[:, j], minlength=n)
    # Pairs of levels: coded as levels of their own (a hash look-up of the chunk's distinct
    # pairs among those met), so the table grows with the distinct pairs, not the chunks.
    pair, n = t.pairs.encode((codes[0] << 32) | codes[1])
    t.pair_rows = _grown(t.pair_rows, n)
    t.pair_rows[:n] += np.bincount(pair, minlength=n)
    if weights is not None:
        t.pair_weights = _grown(t.pair_weights, n)
        t.pair_weights[:n] += np.bincount(pair, weights=weights, minlength=n)


def level_tables(source) -> Tables:
    """Pass 0: per-level and per-pair sums of every (shifted) column, and the raw moments."""
    t = Tables.empty(source.layout.columns)
    scratch = None
    for chunk in source.chunks():
        t.chunks += 1
        if scratch is None:
            scratch = np.empty((BLOCK_ROWS, chunk.values.shape[1]), order="F")
        t.raw = t.raw + chunk_moments(t.raw.columns, chunk.values, chunk.weights,
                                      chunk.n_dropped, chunk.n_filtered, scratch)
        if chunk.values.shape[0]:
            _add_chunk(t, chunk)
    t.finish()
    return t


def drop_singletons(t: Tables) -> tuple[list[np.ndarray], np.ndarray, int]:
    """Levels kept per fixed effect, pairs kept, rows dropped; the tables are updated in place.

    A level with one row left holds that row's weighted values in its sums (and its weight in
    its total), so the row is taken out of the other fixed effect's level by subtraction."""
    key = t.keys
    pa, pb = key >> 32, key & 0xFFFFFFFF
    counts = [t.counts[0].copy(), t.counts[1].copy()]
    alive = np.ones(key.size, dtype=bool)
    dropped = 0
    while True:
        single = [counts[0] == 1, counts[1] == 1]
        hit = np.flatnonzero(alive & (single[0][pa] | single[1][pb]))
        if hit.size == 0:
            break
        a, b = pa[hit], pb[hit]
        via_a = single[0][a]
        row = np.where(via_a[:, None], t.sums[0][a], t.sums[1][b])
        weight = np.where(via_a, t.totals[0][a], t.totals[1][b])
        for k, level in ((0, a), (1, b)):
            np.subtract.at(t.sums[k], level, row)
            np.subtract.at(t.totals[k], level, weight)
            np.subtract.at(counts[k], level, 1.0)
        alive[hit] = False
        dropped += hit.size
    t.counts = counts
    return [counts[0] > 0, counts[1] > 0], alive, dropped
