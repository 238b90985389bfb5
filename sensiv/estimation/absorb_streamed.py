r"""Two absorbed fixed effects on a streamed file, without holding its rows.

The direct solve of :mod:`sensiv.estimation.absorb_direct` needs, per column, only level sums
on each fixed effect and the weighted cross-tabulation of the two: the residual of ``x`` is
``x − α_{b(i)} − β_{s(i)}`` with ``β`` from the ``L_s × L_s`` system and ``α = m − Cβ / t_b``
(``b`` the fixed effect with more levels, ``s`` the other).  So:

* **pass 0** gathers per level of each fixed effect the rows, weight sums and weighted sums of
  every column, and per pair of levels met the rows and weight sums; memory grows with the
  levels and their distinct pairs, not the rows;
* **singletons** are dropped from those tables alone: a level met once holds one row, whose
  weighted values *are* its level sums, so removing it from the other fixed effect's sums needs
  no row (iterated until none remain, as in memory);
* the **check pass** demeans every chunk by two look-ups, sums pass 1's moments from them, and
  measures the change one sweep of alternating projections would make
  (:func:`sensiv.estimation.absorb_direct.sweep_change`, from the residual's level sums on the
  smaller fixed effect), the scale of the stopping rule, and whether each fixed effect is
  nested in a cluster variable; every later pass demeans its chunks the same way.

It serves a file whose used columns exceed :func:`two_way_budget` (below it, one read and
passes over the rows in memory are as fast as three reads at 1e6 rows, and slower beyond).  When
the smaller fixed effect has more than :data:`~sensiv.estimation.absorb_direct.DIRECT_LEVELS`
levels, when the sweep's change exceeds the tolerance, or when the file is one chunk, the
caller holds the rows in memory instead, so the results are those of the in-memory path in
every case (to rounding: ``tests/estimation/test_absorb_streamed.py``).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Iterable, Iterator
from dataclasses import dataclass

import numpy as np

from sensiv.core.errors import InputError
from sensiv.core.memory import available_memory
from sensiv.data.source import Chunk
from sensiv.estimation import absorb as fe
from sensiv.estimation import absorb_direct
from sensiv.estimation.absorb_direct import DENSE_CROSS, EIGEN_CUTOFF
from sensiv.estimation.absorb_view import LevelCodes, apply_drops, model_roles, refusal
from sensiv.estimation.absorb_tables import Tables, drop_singletons, level_tables
from sensiv.estimation.label_codes import cluster_label_columns
from sensiv.estimation.moments import Moments, accumulate


def two_way_budget() -> float:
    """Bytes of used columns up to which two fixed effects on a file are absorbed in memory
    (one read, then passes over the rows held) rather than streamed (three reads, memory in
    the levels): :data:`HELD_BYTES`, or :data:`IN_MEMORY_SHARE` of the memory available where
    that is less."""
    available = available_memory()
    return float(HELD_BYTES if available is None else min(HELD_BYTES,
                                                           IN_MEMORY_SHARE * available))


HELD_BYTES = 128 * 2 ** 20
"""Used columns held in memory for two absorbed fixed effects at most (the values of the
model columns; measured on the design of ``tests/benchmarks/bench_absorb.py``, 8 model
columns, cluster covariance, best of 3: at 1e6 rows (61 MiB) held 0.43 s against streamed
0.54 s; at 4e6 rows held 2.4 s against streamed 1.8 s; at 5e6 rows held 3.7 s and 946 MB peak
against streamed 2.5 s and 293 MB)."""

IN_MEMORY_SHARE = 0.2
"""Share of the available memory the used columns of a two-way absorption may take in memory
(the in-memory path holds about three times as much at its peak: rows, chunk, scratch)."""


@dataclass(frozen=True, slots=True)
class TwoWayStream:
    """Per-level state of a streamed two-way absorption, indexed by the codes of pass 0."""

    labels: tuple  # a pandas Index of each fixed effect's levels (order of Spec.absorb)
    kept: tuple[np.ndarray, np.ndarray]  # per fixed effect and level: kept (not a singleton)
    effects: tuple[np.ndarray, np.ndarray]  # per fixed effect: (levels, kept columns), F order
    shift: np.ndarray  # subtracted from the kept columns before the effects
    keep_columns: np.ndarray


@dataclass(frozen=True, slots=True)
class _Solved:
    """The direct solution (per fixed effect, by the codes of pass 0) and the check's tables."""

    big: int
    levels: tuple[int, int]  # kept levels of each fixed effect
    kept: tuple[np.ndarray, np.ndarray]
    effects: tuple[np.ndarray, np.ndarray]  # α on the larger, β on the smaller (pass-0 codes)
    big_means: np.ndarray  # level means on the larger alone (pass-0 codes): the scale's
    small_counts: np.ndarray  # kept rows per level of the smaller (pass-0 codes)
    big_counts: np.ndarray  # kept rows per level of the larger (compact codes)
    big_totals: np.ndarray  # (compact codes)
    cross: object  # D_b'WD_s (compact codes), dense or CSR
    pairs: object  # D_b'D_s (compact codes)
    pair_codes: tuple[np.ndarray, np.ndarray]  # each pair's levels (compact codes, Spec order)


def _table(rows: np.ndarray, cols: np.ndarray, data: np.ndarray, shape: tuple[int, int]):
    from scipy import sparse

    if shape[0] * shape[1] <= DENSE_CROSS:
        return np.bincount(rows * shape[1] + cols, weights=data,
                           minlength=shape[0] * shape[1]).reshape(shape)
    return sparse.coo_matrix((data, (rows, cols)), shape=shape).tocsr()


def solve(t: Tables, kept: list[np.ndarray], alive: np.ndarray,
          limit: int | None = None) -> _Solved | None:
    """The direct solve from the tables (``None`` when the smaller fixed effect has more than
    ``limit`` levels, by default :data:`~sensiv.estimation.absorb_direct.DIRECT_LEVELS` read at
    the call: alternating projections in memory then)."""
    from scipy import sparse
    from scipy.linalg import eigh

    limit = absorb_direct.DIRECT_LEVELS if limit is None else limit
    levels = (int(kept[0].sum()), int(kept[1].sum()))
    big = 0 if levels[0] >= levels[1] else 1
    small = 1 - big
    if levels[small] > limit:
        return None
    renumber = [np.cumsum(k) - 1 for k in kept]
    key = t.keys[alive]
    codes = (renumber[0][key >> 32], renumber[1][key & 0xFFFFFFFF])
    shape = (levels[big], levels[small])
    cross = _table(codes[big], codes[small], t.pair_weights[alive], shape)
    pairs = _table(codes[big], codes[small], t.pair_rows[alive], shape)
    big_totals, small_totals = t.totals[big][kept[big]], t.totals[small][kept[small]]
    if sparse.issparse(cross):
        gram = -(cross.T @ (sparse.diags(1.0 / big_totals) @ cross)).toarray()
    else:
        gram = -(cross.T @ (cross / big_totals[:, None]))
    gram[np.diag_indices_from(gram)] += small_totals
    values, vectors = eigh(0.5 * (gram + gram.T))
    keep = values > EIGEN_CUTOFF * float(np.max(small_totals))
    basis, inverse = vectors[:, keep], 1.0 / values[keep]
    means = t.sums[big][kept[big]] / big_totals[:, None]
    rhs = t.sums[small][kept[small]] - cross.T @ means
    beta = basis @ ((basis.T @ rhs) * inverse[:, None])
    alpha = means - (cross @ beta) / big_totals[:, None]
    effects: list = [None, None]
    full_means = np.zeros((kept[big].size, means.shape[1]))
    full_means[kept[big]] = means
    for k, solution in ((big, alpha), (small, beta)):
        effects[k] = np.zeros((kept[k].size, solution.shape[1]), order="F")
        effects[k][kept[k]] = solution
    small_counts = np.where(kept[small], t.counts[small], 0.0)
    return _Solved(big, levels, (kept[0], kept[1]), (effects[0], effects[1]),
                   np.asfortranarray(full_means), small_counts, t.counts[big][kept[big]],
                   big_totals, cross, pairs, codes)


def _codes(stream: TwoWayStream, chunk: Chunk, description: str, effects) -> list[np.ndarray]:
    codes = [np.asarray(labels.get_indexer(g)) for labels, g in zip(stream.labels, chunk.groups)]
    if any((c < 0).any() for c in codes):
        raise InputError(f"a fixed effect ({', '.join(effects)}) in {description} has a level "
                         "that was absent in the first pass; the data changed between passes: "
                         "reload it")
    return codes


def _kept_rows(stream: TwoWayStream, chunk: Chunk, codes: list[np.ndarray]):
    """The chunk's rows kept (``None``: all), their codes, weights and clusters."""
    keep = stream.kept[0][codes[0]] & stream.kept[1][codes[1]]
    if keep.all():
        return None, codes, chunk.weights, chunk.clusters
    return (keep, [c[keep] for c in codes],
            None if chunk.weights is None else chunk.weights[keep],
            None if chunk.clusters is None else chunk.clusters[keep])


def demean_chunks(chunks: Iterable[Chunk], stream: TwoWayStream, effects: tuple[str, ...],
                  description: str) -> Iterator[Chunk]:
    """Each chunk without singleton rows, its kept columns minus both fixed effects."""
    s = stream
    for chunk in chunks:
        if chunk.values.shape[0] == 0:
            yield dataclasses.replace(chunk, values=chunk.values[:, s.keep_columns], groups=None)
            continue
        keep, codes, weights, clusters = _kept_rows(s, chunk, _codes(s, chunk, description,
                                                                    effects))
        yield Chunk(_demeaned(s, chunk, keep, codes), weights, clusters, chunk.n_dropped,
                    chunk.n_filtered, None)


def _demeaned(s: TwoWayStream, chunk: Chunk, keep: np.ndarray | None,
              codes: list[np.ndarray]) -> np.ndarray:
    values = np.empty((codes[0].size, s.keep_columns.size), order="F")
    scratch = np.empty(codes[0].size)
    for out, j in enumerate(s.keep_columns):
        column = chunk.values[:, j] if keep is None else chunk.values[keep, j]
        np.subtract(column, s.shift[out], out=values[:, out])
        for k in range(2):
            values[:, out] -= np.take(s.effects[k][:, out], codes[k], out=scratch)
    return values


# ----------------------------------------------------------------------------- check pass
@dataclass
class _Check:
    """What the check pass sums beside the moments."""

    small_sums: np.ndarray  # weighted level sums of the residuals on the smaller (pass-0 codes)
    squares: np.ndarray  # per column: Σ (x − x̄_b)², the scale of the stopping rule
    cluster_codes: list | None = None
    references: list | None = None  # per fixed effect and cluster variable: a cluster per level
    mixed: np.ndarray | None = None  # (2, cluster variables): some level meets two clusters


def _check_nesting(check: _Check, codes: list[np.ndarray], clusters: np.ndarray,
                   sizes: tuple[int, int]) -> None:
    columns = cluster_label_columns(clusters)
    if check.cluster_codes is None:
        check.cluster_codes = [LevelCodes() for _ in columns]
        check.references = [[np.full(n, -1) for _ in columns] for n in sizes]
        check.mixed = np.zeros((2, len(columns)), dtype=bool)
    for v, column in enumerate(columns):
        cluster = check.cluster_codes[v].encode(column)[0]
        for k in range(2):
            reference = check.references[k][v]
            unset = reference[codes[k]] < 0
            reference[codes[k][unset]] = cluster[unset]
            check.mixed[k, v] |= bool(np.any(cluster != reference[codes[k]]))


def _checked_chunks(source, stream: TwoWayStream, solved: _Solved, check: _Check,
                    description: str) -> Iterator[Chunk]:
    big, small = solved.big, 1 - solved.big
    sizes = (stream.kept[0].size, stream.kept[1].size)
    for chunk in source.chunks():
        if chunk.values.shape[0] == 0:
            yield dataclasses.replace(chunk, groups=None)
            continue
        keep, codes, weights, clusters = _kept_rows(stream, chunk, _codes(
            stream, chunk, description, source.spec.absorb))
        values = _demeaned(stream, chunk, keep, codes)
        raw = chunk.values if keep is None else chunk.values[keep]
        for j in range(values.shape[1]):
            within = raw[:, j] - stream.shift[j] - solved.big_means[:, j][codes[big]]
            check.squares[j] += float(np.einsum("i,i->", within, within))
            w_res = values[:, j] if weights is None else values[:, j] * weights
            check.small_sums[:, j] += np.bincount(codes[small], weights=w_res,
                                                  minlength=sizes[small])
        if clusters is not None:
            _check_nesting(check, codes, clusters, sizes)
        yield Chunk(values, weights, clusters, chunk.n_dropped, chunk.n_filtered, None)


def sweep_changes(solved: _Solved, check: _Check, small_totals: np.ndarray) -> np.ndarray:
    """Per column, the relative change one sweep would make to the direct residual (see
    :func:`sensiv.estimation.absorb_direct.sweep_change`; 0 for a column without spread)."""
    kept = solved.kept[1 - solved.big]
    means = check.small_sums[kept] / small_totals[:, None]
    square = solved.small_counts[kept] @ (means * means)
    if solved.big != 0:          # the smaller fixed effect is swept first
        back = (solved.cross @ means) / solved.big_totals[:, None]
        square = square + (solved.big_counts @ (back * back)
                           - 2.0 * np.einsum("ij,ij->j", back, solved.pairs @ means))
    scale = np.sqrt(check.squares)
    change = np.sqrt(np.maximum(square, 0.0))
    return np.where(scale > 0, change / np.where(scale > 0, scale, 1.0), 0.0)


# ----------------------------------------------------------------------------- entry
@dataclass(frozen=True, slots=True)
class Streamed:
    """A streamed two-way absorption: its state, what was absorbed, the model left, notes and
    pass 1's moments (taken in the check pass)."""

    stream: TwoWayStream
    absorption: fe.Absorption
    layout: object
    notes: tuple[str, ...]
    moments: Moments


def _alone(source, stream: TwoWayStream, column: int) -> list[int]:
    """The fixed effects within whose every level ``column`` is constant (the kept rows read
    again, only to name them in an error)."""
    references = [np.full(n.size, np.nan) for n in stream.kept]
    varies = [False, False]
    for chunk in source.chunks():
        if chunk.values.shape[0] == 0:
            continue
        keep, codes, _, _ = _kept_rows(stream, chunk, _codes(stream, chunk, source.description,
                                                             source.spec.absorb))
        values = chunk.values[:, column] if keep is None else chunk.values[keep, column]
        for k in range(2):
            unset = np.isnan(references[k][codes[k]])
            references[k][codes[k][unset]] = values[unset]
            varies[k] = varies[k] or bool(np.any(values != references[k][codes[k]]))
    return [k for k in range(2) if not varies[k]]


def streamed(source, tolerance: float) -> Streamed | None:
    """Two fixed effects absorbed over a streamed ``source`` (see the module notes), or
    ``None`` when the rows must be held in memory instead."""
    spec, layout = source.spec, source.layout
    t = level_tables(source)
    if t.chunks < 2 or t.shift is None:
        return None
    kept, alive, n_singletons = drop_singletons(t)
    if not alive.any():
        raise InputError(f"every row of {source.description} is alone in its level of a fixed "
                         f"effect ({', '.join(spec.absorb)}); nothing is left to fit")
    solved = solve(t, kept, alive)
    if solved is None:
        return None
    p = len(layout.columns)
    stream = TwoWayStream(tuple(c.labels() for c in t.codes), (kept[0], kept[1]),
                          solved.effects, t.shift, np.arange(p))
    small = 1 - solved.big
    check = _Check(np.zeros((kept[small].size, p)), np.zeros(p))
    moments = accumulate(_checked_chunks(source, stream, solved, check, source.description),
                         layout.columns)
    achieved = float(np.max(sweep_changes(solved, check, t.totals[small][kept[small]]),
                            initial=0.0))
    if achieved > tolerance:
        return None
    within, total = np.sqrt(np.diag(moments.comoment)), np.sqrt(np.diag(t.raw.comoment))
    absorbed = [j for j in range(p) if not within[j] > fe.ABSORBED_SHARE * total[j]]
    roles = model_roles(layout)
    for j in absorbed:
        if roles[j][0] != "control":
            raise refusal(roles[j][0], roles[j][1],
                          [spec.absorb[k] for k in _alone(source, stream, j)] or
                          list(spec.absorb))
    keep_cols, new_layout, dropped, notes = apply_drops(absorbed, layout, spec.absorb)
    stream = dataclasses.replace(
        stream, effects=tuple(np.asfortranarray(e[:, keep_cols]) for e in stream.effects),
        shift=t.shift[keep_cols], keep_columns=keep_cols)
    moments = Moments(tuple(new_layout.columns), moments.n, moments.n_dropped,
                      moments.weight_sum, moments.mean[keep_cols],
                      moments.comoment[np.ix_(keep_cols, keep_cols)], moments.n_filtered)
    absorption = _absorption(spec, layout, solved, check, n_singletons, achieved, tolerance,
                             dropped)
    return Streamed(stream, absorption, new_layout, notes, moments)


def _absorption(spec, layout, solved: _Solved, check: _Check, n_singletons: int,
                achieved: float, tolerance: float, dropped) -> fe.Absorption:
    """Levels, counted levels (the second less the connected components of the two), nesting
    in the cluster variables, as :func:`sensiv.estimation.absorbed_source` reports them."""
    a, b = solved.pair_codes
    levels = solved.levels
    counted = (levels[0] - 1 + int(not layout.constant),
               levels[1] - fe.components(a, levels[0], b, levels[1]))
    nested = ((False, False) if check.mixed is None else
              tuple(bool(np.any(~check.mixed[k])) for k in range(2)))
    return fe.Absorption(spec.absorb, levels, counted, nested, n_singletons, 1, achieved,
                         tolerance, dropped, streamed=True)
