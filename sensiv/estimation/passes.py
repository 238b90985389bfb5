"""The one dispatch point of the two passes over the rows: each calls the engine the source
carries (``source.engine``: ``numpy``, ``duckdb`` or ``dask``) and returns the same
:class:`~sensiv.estimation.moments.Moments` / :class:`~sensiv.estimation.moments.ScoreSums`,
so everything downstream is the same whichever engine read the rows.

* ``numpy`` (default): :func:`~sensiv.estimation.moments.accumulate` and
  :func:`~sensiv.estimation.moments.score_sums` over ``source.chunks()`` in this process;
  with one-way clusters pass 1 also gathers each cluster's moment matrix and pass 2 maps
  those (:mod:`sensiv.estimation.cluster_moments`) instead of reading the rows again.
* ``duckdb``: both passes as SQL aggregates inside DuckDB over the files
  (:mod:`sensiv.estimation.engines.duckdb_engine`).
* ``dask``: the same chunk kernels per partition on a Dask cluster, merged in a tree
  (:mod:`sensiv.estimation.engines.dask_engine`).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from sensiv.data.datasets import column_frames
from sensiv.data.readers import DEFAULT_CHUNK_ROWS
from sensiv.data.subsets import IndicatorCounts, count_frames, counted_columns
from sensiv.estimation.engines import dask_engine, duckdb_engine
from sensiv.estimation.absorb_view import GroupStats
from sensiv.estimation.cells import Cells, count_cells
from sensiv.estimation.cluster_moments import Gatherer, gathering, recall, remember, scores_from
from sensiv.estimation.cluster_ways import combine_ways
from sensiv.estimation.moments import Moments, ScoreBlock, ScoreSums, accumulate, score_sums


def engine_of(source) -> str:
    """The engine a source asks for (``numpy`` for objects that carry none)."""
    return getattr(source, "engine", "numpy") or "numpy"


def moments_of(source, columns: Sequence[str]) -> Moments:
    """Pass 1 over ``source``: weighted means and centred co-moments of ``columns`` (those a
    source already carries, e.g. a streamed one-way absorption's from its pass 0)."""
    known = getattr(source, "moments", None)
    if known is not None and known.columns == tuple(columns):
        return known
    engine = engine_of(source)
    if engine == "duckdb":
        return duckdb_engine.moments(source, columns)
    if engine == "dask":
        return dask_engine.moments(source, columns)
    gatherer = Gatherer(len(columns))
    moments = accumulate(gathering(source.chunks(), gatherer), columns)
    remember(source, gatherer.result())
    return moments


def scores_of(source, mean: np.ndarray, blocks: Sequence[ScoreBlock], cluster: bool
              ) -> ScoreSums:
    """Pass 2 over ``source``: robust or one-way cluster sums of score outer products."""
    engine = engine_of(source)
    if engine == "duckdb":
        return duckdb_engine.score_sums(source, mean, blocks, cluster)
    if engine == "dask":
        return dask_engine.score_sums(source, mean, blocks, cluster)
    gathered = recall(source, len(mean)) if cluster else None
    if gathered is not None:
        return combine_ways([scores_from(gathered, mean, blocks)])
    return score_sums(source.chunks(), mean, blocks, cluster)


def group_stats_of(source) -> GroupStats:
    """Pass 0 of one absorbed fixed effect on the ``duckdb`` / ``dask`` engine: per-level sums
    as a group-by (:mod:`sensiv.estimation.absorb_view`)."""
    if engine_of(source) == "duckdb":
        return duckdb_engine.group_stats(source)
    return dask_engine.group_stats(source)


def cells_of(source, limits: Sequence[int]) -> Cells:
    """The cell counts of a discrete outcome, treatment and instrument (the first three
    columns), on the source's engine (:mod:`sensiv.estimation.cells`)."""
    engine = engine_of(source)
    if engine == "duckdb":
        return duckdb_engine.cells(source, limits)
    if engine == "dask":
        return dask_engine.cells(source, limits)
    return count_cells(source.chunks(), limits)


def indicator_counts_of(source, column: str) -> IndicatorCounts:
    """The counts of a 0/1 column over the rows the row filter keeps of a source read from
    files, a DuckDB table or a Dask DataFrame (:mod:`sensiv.data.subsets`), on its engine."""
    engine = engine_of(source)
    if engine == "duckdb":
        return duckdb_engine.indicator_counts(source, column)
    if engine == "dask":
        return dask_engine.indicator_counts(source, column)
    rows, kept = source.chunk_rows or DEFAULT_CHUNK_ROWS, source.row_filter
    return sum((count_frames(frames, column, kept) for frames in
                column_frames(source.origin, counted_columns(column, kept), rows)),
               IndicatorCounts())
