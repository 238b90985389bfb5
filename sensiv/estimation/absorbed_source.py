"""A data source whose chunks carry the model columns with the fixed effects of ``Spec.absorb``
partialled out (see :mod:`sensiv.estimation.absorb`): every pass of the moments and scores then
runs unchanged on the demeaned columns.

* **In memory** (a frame, or several fixed effects on a file): the used columns are gathered as
  float64 (one copy of them; a streamed file with several fixed effects is loaded this way
  while its used columns fit in
  :func:`~sensiv.estimation.absorb_streamed.two_way_budget`), singletons are dropped, and the
  columns are demeaned once and kept.
* **Two fixed effects streamed** (a file whose used columns exceed the budget):
  :mod:`sensiv.estimation.absorb_streamed` — level and pair tables in a first pass, the direct
  solve on them, every later pass demeaned by two look-ups.
* **Streamed** (one fixed effect on a file): a first pass gathers per-level row counts, weight
  sums, weighted sums and the within-level minimum and maximum of every column — memory grows
  with the levels, not the rows; every later pass demeans each chunk by the level means.
  Chosen over the one-pass ``Σxy − Σ_g S_x S_y / w_g`` formula, which loses digits to
  cancellation when a column varies little within levels: centring each row by its level mean
  first keeps the cross-products as accurate as on the raw columns, for the price of one extra
  cheap pass.
"""

from __future__ import annotations

import warnings
from collections.abc import Iterator
from dataclasses import dataclass, field

import numpy as np

from sensiv.core.errors import AbsorbConvergenceWarning, InputError
from sensiv.core.memory import release_freed
from sensiv.data.source import Chunk, Layout
from sensiv.estimation import absorb as fe
from sensiv.estimation import absorb_streamed
from sensiv.estimation.absorb_view import (GroupAbsorbed, LevelCodes, Stream, apply_drops,
                                           demean_chunks, group_absorbed, model_roles, refusal)
from sensiv.estimation.label_codes import LabelCodes, cluster_label_columns
from sensiv.estimation.moments import BLOCK_ROWS, Moments, chunk_moments, empty_moments
from sensiv.estimation.passes import engine_of, group_stats_of


@dataclass(frozen=True, slots=True)
class AbsorbedSource:
    """A source (``spec``, ``layout``, ``description``, ``notes``, ``chunks()``) of demeaned rows,
    with the :class:`~sensiv.estimation.absorb.Absorption` that produced them."""

    spec: object
    layout: Layout
    description: str
    absorption: fe.Absorption
    notes: tuple[str, ...] = ()
    _cache: tuple[Chunk, ...] | None = field(default=None, repr=False)
    _source: object = field(default=None, repr=False)
    _stream: Stream | absorb_streamed.TwoWayStream | None = field(default=None, repr=False)
    moments: Moments | None = field(default=None, repr=False)
    """Pass 1's moments when pass 0 already gave them (streamed one-way absorption)."""

    def chunks(self) -> Iterator[Chunk]:
        if self._cache is not None:
            for chunk in self._cache:
                yield from _pieces(chunk)
            return
        if isinstance(self._stream, absorb_streamed.TwoWayStream):
            yield from absorb_streamed.demean_chunks(self._source.chunks(), self._stream,
                                                    self.absorption.effects, self.description)
            return
        yield from demean_chunks(self._source.chunks(), self._stream,
                                 self.absorption.effects[0], self.description)


# ----------------------------------------------------------------------------- in memory
PIECE_ROWS = 65_536
"""Rows per chunk handed to the passes from the demeaned rows held in memory (views, no copy):
the kernels run several times faster on blocks that stay in cache than on one block of every
row (measured: pass 2 at 1e6 rows, ``tests/benchmarks/bench_absorb.py``)."""


def _pieces(chunk: Chunk) -> Iterator[Chunk]:
    """``chunk`` as views of at most :data:`PIECE_ROWS` rows (the counts on the first)."""
    n = chunk.values.shape[0]
    if n <= PIECE_ROWS:
        yield chunk
        return
    for start in range(0, n, PIECE_ROWS):
        rows = slice(start, start + PIECE_ROWS)
        first = start == 0
        yield Chunk(chunk.values[rows],
                    None if chunk.weights is None else chunk.weights[rows],
                    None if chunk.clusters is None else chunk.clusters[rows],
                    chunk.n_dropped if first else 0, chunk.n_filtered if first else 0, None)


def _gather(chunks: list[Chunk], n_effects: int, description: str):
    """Rows of every chunk stacked: values (float64, column-major), weights, clusters, labels.

    Each chunk's values are released (and their pages handed back) as soon as they are
    copied, and the labels are stacked only after that (``chunks`` is emptied), so the peak
    is one copy of the used columns and one chunk, not two copies."""
    chunks[:] = [c for c in chunks if c.values.shape[0]]
    if not chunks:
        raise InputError(f"{description} has no rows left to absorb fixed effects from")
    try:
        values = np.empty((sum(c.values.shape[0] for c in chunks), chunks[0].values.shape[1]),
                          order="F")
    except MemoryError as exc:
        raise InputError(f"{description} is too large to hold its used columns in memory for "
                         "several absorbed fixed effects; absorb one fixed effect, or filter "
                         "rows with --where") from exc
    weights = [c.weights for c in chunks] if chunks[0].weights is not None else None
    clusters = [c.clusters for c in chunks] if chunks[0].clusters is not None else None
    groups = [[c.groups[j] for c in chunks] for j in range(n_effects)]
    start = 0
    for i, chunk in enumerate(chunks):
        rows = chunk.values.shape[0]
        values[start:start + rows] = chunk.values
        start += rows
        chunks[i] = chunk = None
        release_freed()
    chunks.clear()
    weights = None if weights is None else np.concatenate(weights)
    clusters = None if clusters is None else np.concatenate(clusters)
    for j in range(n_effects):
        groups[j] = np.concatenate(groups[j])
    return values, weights, clusters, groups


def _core_columns(source, keep: np.ndarray, n_core: int) -> np.ndarray:
    """The outcome, treatment and instrument columns of the rows kept, read again (only to
    name the fixed effect that absorbs one of them, on the way to an error)."""
    values = _gather(list(source.chunks()), len(source.spec.absorb), source.description)[0]
    return values[keep][:, :n_core]


def _held_chunks(source, budget: float | None = None) -> list[Chunk] | None:
    """Every chunk of ``source`` (each frame read is freed; its pages go back at once), or
    ``None`` as soon as their values take more than ``budget`` bytes."""
    held, size = [], 0
    for chunk in source.chunks():
        held.append(chunk)
        size += chunk.values.nbytes
        release_freed()
        if budget is not None and size > budget:   # read again by the streamed passes
            held.clear()
            release_freed()
            return None
    return held


def _in_memory(source, tolerance: float, max_iterations: int,
               all_chunks: list[Chunk] | None = None) -> AbsorbedSource:
    spec, layout = source.spec, source.layout
    if all_chunks is None:
        all_chunks = _held_chunks(source)
    n_dropped = sum(c.n_dropped for c in all_chunks)
    n_filtered = sum(c.n_filtered for c in all_chunks)
    values, weights, clusters, groups = _gather(all_chunks, len(spec.absorb), source.description)
    del all_chunks
    release_freed()
    codes, levels = map(list, zip(*(fe.encode(g) for g in groups)))
    del groups                      # the labels are not needed once coded
    release_freed()
    keep = fe.singleton_rows(codes)
    n_singletons = int((~keep).sum())
    if n_singletons:
        values = np.asfortranarray(values[keep])
        weights = None if weights is None else weights[keep]
        clusters = None if clusters is None else clusters[keep]
        for k in range(len(codes)):  # renumbered one by one: one old code column alive
            codes[k], levels[k] = fe.recode(codes[k][keep])
    if values.shape[0] == 0:
        raise InputError(f"every row of {source.description} is alone in its level of a fixed "
                         f"effect ({', '.join(spec.absorb)}); nothing is left to fit")
    total = [fe.spread(values[:, j], weights) for j in range(values.shape[1])]
    # An absorbed outcome, treatment or instrument is an error naming the fixed effect that
    # absorbs it (its raw column read again then); controls are dropped whichever absorbs them.
    n_core = 1 + len(layout.treatments) + len(layout.instruments)
    values, steps, achieved = fe.demean_columns(values, codes, levels, weights, tolerance,
                                                max_iterations)
    release_freed()                 # the labels and the demeaning's scratch rows
    if len(codes) > 1 and achieved > tolerance:
        warnings.warn(f"alternating projections for the fixed effects {', '.join(spec.absorb)} "
                      f"stopped after {steps} step{'s' if steps != 1 else ''} at a relative "
                      f"change {achieved:.2e}, above the tolerance {tolerance:.1e}; results may "
                      "be inaccurate",
                      AbsorbConvergenceWarning, stacklevel=4)
    absorbed = [j for j in range(values.shape[1])
                if not fe.spread(values[:, j], weights) > fe.ABSORBED_SHARE * total[j]]
    for j in absorbed:
        if model_roles(layout)[j][0] != "control" and len(codes) > 1:
            original = _core_columns(source, keep, n_core)
            alone = fe.absorbed_by(original[:, j], codes, levels, weights)
            raise refusal(model_roles(layout)[j][0], model_roles(layout)[j][1],
                          [spec.absorb[k] for k in alone] or list(spec.absorb))
    keep_cols, new_layout, dropped, notes = apply_drops(absorbed, layout, spec.absorb)
    if absorbed:
        values = np.asfortranarray(values[:, keep_cols])
    counted = fe.counted_levels(codes, levels)
    # Without a constant in the model the first fixed effect's levels all count.
    counted = (counted[0] + int(not layout.constant), *counted[1:])
    absorption = fe.Absorption(
        spec.absorb, tuple(int(n) for n in levels), counted,
        _nested(codes, levels, clusters), n_singletons, steps, achieved, tolerance, dropped,
        streamed=False)
    chunk = Chunk(values, weights, clusters, n_dropped, n_filtered, None)
    return AbsorbedSource(spec, new_layout, source.description, absorption,
                          tuple(getattr(source, "notes", ())) + notes, (chunk,))


def _nested(codes, levels, clusters) -> tuple[bool, ...]:
    """Whether each fixed effect is nested in a cluster variable (in either of two-way's)."""
    if clusters is None:
        return tuple(False for _ in codes)
    encoded = [fe.encode(column) for column in cluster_label_columns(clusters)]
    return tuple(any(fe.nested_in(c, n, cl, n_cl) for cl, n_cl in encoded)
                 for c, n in zip(codes, levels))


# ----------------------------------------------------------------------------- streamed
WITHIN_SHARE = 1e-3
"""Smallest share of a column's spread left within the levels for which pass 1's moments are
taken from pass 0's sums (see :func:`_within_moments`)."""


def _grow(array: np.ndarray | None, rows: int, fill: float, width: int | None = None):
    shape = (rows,) if width is None else (rows, width)
    block = np.full(shape, fill, dtype=np.int64 if isinstance(fill, int) else np.float64)
    return block if array is None else np.concatenate([array, block])


def _with_new_levels(reference: np.ndarray | None, codes: np.ndarray, old: int, n: int,
                     block: np.ndarray) -> np.ndarray:
    """``reference`` (levels × columns, column-major) grown by one row of ``block`` per level
    first met in this chunk (codes ``old`` … ``n − 1``; which of the level's rows is taken does
    not matter: a column is constant within a level exactly when every row equals any one)."""
    if reference is not None and n == old:
        return reference
    fresh = np.empty((n - old, block.shape[1]), dtype=block.dtype)
    new_rows = codes >= old
    fresh[codes[new_rows] - old] = block[new_rows]
    grown = fresh if reference is None else np.concatenate([reference, fresh])
    return np.asfortranarray(grown)


def _varies(reference: np.ndarray, codes: np.ndarray, block: np.ndarray,
            known: np.ndarray | None) -> np.ndarray:
    """Per column of ``block``: whether some row differs from its level's reference row (or
    an earlier chunk's did: ``known``; those columns are not looked at again)."""
    seen = np.zeros(block.shape[1], dtype=bool) if known is None else known.copy()
    for j in np.flatnonzero(~seen):
        seen[j] = bool(np.any(block[:, j] != reference[:, j][codes]))
    return seen


def _first_pass(source) -> tuple:
    """Per-level counts, weight sums and weighted sums of every (shifted) column; per column
    whether it varies within some level, and per cluster variable whether every level lies in
    one of its clusters (both from one reference row per level, no per-row minima/maxima)."""
    levels, cluster_codes_of = LevelCodes(), None
    counts = totals = sums = reference = c_reference = varies = c_varies = None
    shift = scratch = None
    raw = empty_moments(source.layout.columns)
    n_chunks = 0
    for chunk in source.chunks():
        n_chunks += 1
        if scratch is None or scratch.shape[1] != chunk.values.shape[1]:
            scratch = np.empty((BLOCK_ROWS, chunk.values.shape[1]), order="F")
        raw = raw + chunk_moments(raw.columns, chunk.values, chunk.weights, chunk.n_dropped,
                                  chunk.n_filtered, scratch)
        if chunk.values.shape[0] == 0:
            continue
        if shift is None:
            shift = chunk.values[0].copy()
        old = 0 if counts is None else counts.size
        codes, n = levels.encode(chunk.groups[0])
        p = chunk.values.shape[1]
        if counts is None or counts.size < n:
            counts, totals = _grow(counts, n - old, 0), _grow(totals, n - old, 0.0)
            sums = _grow(sums, n - old, 0.0, p)
        reference = _with_new_levels(reference, codes, old, n, chunk.values)
        varies = _varies(reference, codes, chunk.values, varies)
        if chunk.clusters is not None:
            columns = cluster_label_columns(chunk.clusters)
            cluster_codes_of = cluster_codes_of or [LabelCodes() for _ in columns]
            block = np.column_stack([cluster_codes_of[j].encode(column)[0]
                                     for j, column in enumerate(columns)])
            c_reference = _with_new_levels(c_reference, codes, old, n, block)
            c_varies = _varies(c_reference, codes, block, c_varies)
        counts += np.bincount(codes, minlength=n)
        totals += fe.group_weights(codes, n, chunk.weights)
        for j in range(p):
            column = chunk.values[:, j] - shift[j]
            w_col = column if chunk.weights is None else column * chunk.weights
            sums[:, j] += np.bincount(codes, weights=w_col, minlength=n)
    # per cluster variable: whether no level meets two of its clusters.
    nested = None if c_varies is None else ~c_varies
    # One chunk: the rows are demeaned before pass 1, exactly as in memory, so that a file and
    # the same rows loaded give bit-identical results (the second read of one chunk is cheap).
    return levels.labels(), counts, totals, sums, varies, shift, nested, (
        raw if n_chunks > 1 else None)


def _within_moments(raw: Moments, totals: np.ndarray, sums: np.ndarray, shift: np.ndarray,
                    kept: np.ndarray, counts: np.ndarray, keep_cols: np.ndarray,
                    columns: tuple[str, ...]) -> Moments | None:
    """Pass 1's moments of the demeaned columns from pass 0's, without another pass:
    ``C_within = C − Σ_g t_g (m_g − μ)(m_g − μ)'`` over every level (a singleton row deviates
    by nothing from its own level's mean), with mean 0.  ``None`` when some column keeps less
    than :data:`WITHIN_SHARE` of its spread within the levels: the subtraction would then lose
    more than three digits, and the rows are demeaned first instead (pass 1 proper)."""
    centre = raw.mean - shift
    deviations = sums / np.where(totals > 0, totals, 1.0)[:, None] - centre
    between = (deviations * totals[:, None]).T @ deviations
    within = (raw.comoment - between)[np.ix_(keep_cols, keep_cols)]
    if np.any(np.diag(within) < WITHIN_SHARE * np.diag(raw.comoment)[keep_cols]):
        return None
    return Moments(columns, int(counts[kept].sum()), raw.n_dropped, float(totals[kept].sum()),
                   np.zeros(keep_cols.size), 0.5 * (within + within.T), raw.n_filtered)


def _streamed(source) -> AbsorbedSource:
    spec, layout = source.spec, source.layout
    labels, counts, totals, sums, varies, shift, nested_ways, raw = _first_pass(source)
    kept = counts > 1
    n_singletons = int(counts[~kept].sum())
    if not kept.any():
        raise InputError(f"every row of {source.description} is alone in its level of the "
                         f"fixed effect '{spec.absorb[0]}'; nothing is left to fit")
    # A singleton level never varies, so 'varies within some level' is over the kept ones.
    absorbed = [j for j in range(varies.size) if not varies[j]]
    keep_cols, new_layout, dropped, notes = apply_drops(absorbed, layout, spec.absorb)
    offset = np.asfortranarray((sums / np.where(totals > 0, totals, 1.0)[:, None])[:, keep_cols])
    levels = int(kept.sum())
    # Nested when every kept level lies within one cluster of the same cluster variable.
    nested = (nested_ways is not None and bool(np.any(nested_ways)),)
    counted = (levels - int(layout.constant),)  # the constant, if any, takes one level
    absorption = fe.Absorption(spec.absorb, (levels,), counted, nested, n_singletons, 1,
                               0.0, fe.DEFAULT_TOLERANCE, dropped, streamed=True)
    stream = Stream(labels, counts, offset, shift[keep_cols], keep_cols)
    moments = None if raw is None else _within_moments(raw, totals, sums, shift, kept, counts,
                                                       keep_cols, tuple(new_layout.columns))
    return AbsorbedSource(spec, new_layout, source.description, absorption,
                          tuple(getattr(source, "notes", ())) + notes, None, source, stream,
                          moments)


def absorb_source(source, *, tolerance: float | None = None,
                  max_iterations: int = fe.MAX_ITERATIONS):
    """The source with ``source.spec.absorb`` partialled out (``source`` itself without any).

    One fixed effect on a streamed source streams (memory grows with its levels); on the
    ``duckdb`` and ``dask`` engines it is a group-by on the engine
    (:mod:`sensiv.estimation.absorb_view`).  Otherwise the used columns are held in memory as
    float64 (several fixed effects on ``dask`` too; ``duckdb`` refuses them).
    """
    if not source.spec.absorb or isinstance(source, (AbsorbedSource, GroupAbsorbed)):
        return source
    if tolerance is None:       # the spec's (--absorb-tolerance, recipe key absorb_tolerance)
        tolerance = getattr(source.spec, "absorb_tolerance", fe.DEFAULT_TOLERANCE)
    if not (isinstance(tolerance, float) and 0.0 < tolerance < 1.0):
        raise InputError(f"absorb tolerance {tolerance!r} must be a number in (0, 1), e.g. 1e-10")
    engine = engine_of(source)
    if engine != "numpy":
        if len(source.spec.absorb) == 1:
            return group_absorbed(source, group_stats_of(source))
        if engine == "duckdb":
            raise InputError(f"several absorbed fixed effects ({', '.join(source.spec.absorb)})"
                             " need alternating projections, which --engine duckdb cannot "
                             "iterate; --engine dask and --engine numpy can (both hold the used "
                             "columns in memory), or absorb one fixed effect on --engine duckdb")
        # dask: the used columns are gathered here and demeaned as numpy does (in memory)
    if len(source.spec.absorb) == 1 and not getattr(source, "in_memory", True):
        return _streamed(source)
    held = None
    if (len(source.spec.absorb) == 2 and engine == "numpy"
            and not getattr(source, "in_memory", True)):
        # Held (one read, then passes over the rows in memory) unless their values exceed
        # the budget; then streamed (three reads, memory in the levels), where it can be.
        held = _held_chunks(source, absorb_streamed.two_way_budget())
        found = None if held is not None else absorb_streamed.streamed(source, tolerance)
        if found is not None:
            return AbsorbedSource(source.spec, found.layout, source.description,
                                  found.absorption,
                                  tuple(getattr(source, "notes", ())) + found.notes, None,
                                  source, found.stream, found.moments)
    return _in_memory(source, tolerance, max_iterations, held)
