"""A data source whose chunks carry the model columns with the fixed effects of ``Spec.absorb``
partialled out (see :mod:`sensiv.estimation.absorb`): every pass of the moments and scores then
runs unchanged on the demeaned columns.

* **In memory** (a frame, or several fixed effects on a file): the used columns are gathered as
  float64 (one copy of them; a streamed file with several fixed effects is loaded this way),
  singletons are dropped, and the columns are demeaned once and kept.
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
from sensiv.data.source import Chunk, Layout
from sensiv.estimation import absorb as fe
from sensiv.estimation.absorb_view import (GroupAbsorbed, Stream, apply_drops, demean_chunks,
                                           group_absorbed, model_roles, refusal)
from sensiv.estimation.moments import LabelCodes, cluster_label_columns
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
    _stream: Stream | None = field(default=None, repr=False)

    def chunks(self) -> Iterator[Chunk]:
        if self._cache is not None:
            yield from self._cache
            return
        yield from demean_chunks(self._source.chunks(), self._stream,
                                 self.absorption.effects[0], self.description)


# ----------------------------------------------------------------------------- in memory
def _gather(chunks: list[Chunk], n_effects: int, description: str):
    """Rows of every chunk stacked: values (float64, column-major), weights, clusters, labels."""
    chunks = [c for c in chunks if c.values.shape[0]]
    try:
        values = np.asfortranarray(np.vstack([c.values for c in chunks]))
    except MemoryError as exc:
        raise InputError(f"{description} is too large to hold its used columns in memory for "
                         "several absorbed fixed effects; absorb one fixed effect, or filter "
                         "rows with --where") from exc
    weights = np.concatenate([c.weights for c in chunks]) if chunks[0].weights is not None else None
    clusters = (np.concatenate([c.clusters for c in chunks])
                if chunks[0].clusters is not None else None)
    groups = [np.concatenate([c.groups[j] for c in chunks]) for j in range(n_effects)]
    return values, weights, clusters, groups


def _in_memory(source, tolerance: float, max_iterations: int) -> AbsorbedSource:
    spec, layout = source.spec, source.layout
    all_chunks = list(source.chunks())
    n_dropped = sum(c.n_dropped for c in all_chunks)
    n_filtered = sum(c.n_filtered for c in all_chunks)
    values, weights, clusters, groups = _gather(all_chunks, len(spec.absorb), source.description)
    del all_chunks
    codes = [fe.encode(g)[0] for g in groups]
    keep = fe.singleton_rows(codes)
    n_singletons = int((~keep).sum())
    if n_singletons:
        values = np.asfortranarray(values[keep])
        weights = None if weights is None else weights[keep]
        clusters = None if clusters is None else clusters[keep]
        codes = [c[keep] for c in codes]
    if values.shape[0] == 0:
        raise InputError(f"every row of {source.description} is alone in its level of a fixed "
                         f"effect ({', '.join(spec.absorb)}); nothing is left to fit")
    codes, levels = zip(*(fe.recode(c) for c in codes))
    total = [fe.spread(values[:, j], weights) for j in range(values.shape[1])]
    # Only the outcome, treatments and instruments are kept undemeaned (to name the fixed
    # effect that absorbs one of them); controls are dropped whichever absorbs them.
    n_core = 1 + len(layout.treatments) + len(layout.instruments)
    original = values[:, :n_core].copy() if len(codes) > 1 else None
    values, steps, achieved = fe.demean_columns(values, codes, levels, weights, tolerance,
                                                max_iterations)
    if len(codes) > 1 and achieved > tolerance:
        warnings.warn(f"alternating projections for the fixed effects {', '.join(spec.absorb)} "
                      f"stopped after {steps} steps at a relative change {achieved:.2e}, above "
                      f"the tolerance {tolerance:.1e}; results may be inaccurate",
                      AbsorbConvergenceWarning, stacklevel=4)
    absorbed = [j for j in range(values.shape[1])
                if not fe.spread(values[:, j], weights) > fe.ABSORBED_SHARE * total[j]]
    for j in absorbed:
        if model_roles(layout)[j][0] != "control" and original is not None:
            alone = fe.absorbed_by(original[:, j], codes, levels, weights)
            raise refusal(model_roles(layout)[j][0], model_roles(layout)[j][1],
                          [spec.absorb[k] for k in alone] or list(spec.absorb))
    del original
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
def _grow(array: np.ndarray | None, rows: int, fill: float, width: int | None = None):
    shape = (rows,) if width is None else (rows, width)
    block = np.full(shape, fill, dtype=np.int64 if isinstance(fill, int) else np.float64)
    return block if array is None else np.concatenate([array, block])


def _first_pass(source) -> tuple:
    """Per-level counts, weight sums, weighted sums, minima and maxima of every column, and
    the smallest and largest cluster code met in each level (equal when nested)."""
    import pandas as pd

    levels, cluster_codes_of = LabelCodes(), None
    counts = totals = sums = lows = highs = None
    c_low = c_high = None
    shift = None
    n_dropped = n_filtered = 0
    for chunk in source.chunks():
        if chunk.values.shape[0] == 0:
            continue
        if shift is None:
            shift = chunk.values[0].copy()
        codes, n = levels.encode(chunk.groups[0])
        p = chunk.values.shape[1]
        if counts is None or counts.size < n:
            grow = n - (0 if counts is None else counts.size)
            counts, totals = _grow(counts, grow, 0), _grow(totals, grow, 0.0)
            sums, lows = _grow(sums, grow, 0.0, p), _grow(lows, grow, np.inf, p)
            highs = _grow(highs, grow, -np.inf, p)
            k = 1 if chunk.clusters is None else len(cluster_label_columns(chunk.clusters))
            c_low, c_high = _grow(c_low, grow, np.inf, k), _grow(c_high, grow, -np.inf, k)
        if chunk.clusters is not None:
            columns = cluster_label_columns(chunk.clusters)
            cluster_codes_of = cluster_codes_of or [LabelCodes() for _ in columns]
            for j, column in enumerate(columns):
                cluster_codes, _ = cluster_codes_of[j].encode(column)
                np.minimum.at(c_low[:, j], codes, cluster_codes)
                np.maximum.at(c_high[:, j], codes, cluster_codes)
        counts += np.bincount(codes, minlength=n)
        totals += fe.group_weights(codes, n, chunk.weights)
        for j in range(p):
            column = chunk.values[:, j] - shift[j]
            w_col = column if chunk.weights is None else column * chunk.weights
            sums[:, j] += np.bincount(codes, weights=w_col, minlength=n)
            np.minimum.at(lows[:, j], codes, column)
            np.maximum.at(highs[:, j], codes, column)
    # levels × cluster variables: whether the level meets a single cluster of that variable.
    nested = None if c_low is None or not cluster_codes_of else c_low == c_high
    return pd.Index(levels.labels()), counts, totals, sums, lows, highs, shift, nested


def _streamed(source) -> AbsorbedSource:
    spec, layout = source.spec, source.layout
    labels, counts, totals, sums, lows, highs, shift, nested_levels = _first_pass(source)
    kept = counts > 1
    n_singletons = int(counts[~kept].sum())
    if not kept.any():
        raise InputError(f"every row of {source.description} is alone in its level of the "
                         f"fixed effect '{spec.absorb[0]}'; nothing is left to fit")
    flat = np.all(highs[kept] - lows[kept] == 0.0, axis=0)
    absorbed = [j for j in range(flat.size) if flat[j]]
    keep_cols, new_layout, dropped, notes = apply_drops(absorbed, layout, spec.absorb)
    offset = np.asfortranarray((sums / np.where(totals > 0, totals, 1.0)[:, None])[:, keep_cols])
    levels = int(kept.sum())
    # Nested when every kept level lies within one cluster of the same cluster variable.
    nested = (nested_levels is not None
              and bool(np.any(np.all(nested_levels[kept], axis=0))),)
    counted = (levels - int(layout.constant),)  # the constant, if any, takes one level
    absorption = fe.Absorption(spec.absorb, (levels,), counted, nested, n_singletons, 1,
                               0.0, fe.DEFAULT_TOLERANCE, dropped, streamed=True)
    stream = Stream(labels, counts, offset, shift[keep_cols], keep_cols)
    return AbsorbedSource(spec, new_layout, source.description, absorption,
                          tuple(getattr(source, "notes", ())) + notes, None, source, stream)


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
    return _in_memory(source, tolerance, max_iterations)
