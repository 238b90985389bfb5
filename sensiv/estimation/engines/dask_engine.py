"""The Dask engine: the numpy chunk kernels run per partition on a Dask cluster and their
results are merged by the additive rules in a tree reduction.

* Pass 1: each partition (one file of a data set, or one chunk of in-memory data) is cleaned
  with the data layer's rules and reduced to :class:`~sensiv.estimation.moments.Moments` plus
  its row counts; partitions merge by ``Moments.__add__`` (Chan, Golub & LeVeque), the counts
  by addition, and the whole-data checks run once on the merged counts.
* One-way clusters: pass 1 also gathers each cluster's moment matrix per partition
  (:mod:`sensiv.estimation.cluster_moments`), merged by label in the same tree; pass 2's
  cluster sums are maps of those matrices, with no second round of tasks.
* Otherwise pass 2: robust sums of score products add across partitions; cluster sums are per-cluster
  score sums per partition, merged by a group-by sum over the labels, then ``Σ_g s_g s_g'``;
  two-way clusters the same for ``A``, ``B`` and the pairs ``A∩B``, combined as numpy does.
* One absorbed fixed effect: a pass 0 of per-level sums per partition (a groupby-sum, merged
  by label in the same tree); passes 1 and 2 then run the same kernels on each partition's
  chunks demeaned by the level means, broadcast to every worker once per pass.

``source.scheduler`` (``tcp://host:8786``) connects to a running cluster; without it a local
cluster (one single-threaded worker process per core) is started once per process and shut
down at exit.  Only the reduced sums (a few kB per partition) travel back.
"""

from __future__ import annotations

import atexit
import dataclasses
import os
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np

from sensiv.core.errors import InputError
from sensiv.core.progress import Progress
from sensiv.data.convert import Tally
from sensiv.data.datasets import column_frames, missing_extra, partition_frames
from sensiv.data.source import clean_chunks
from sensiv.data.spec import cluster_columns, read_columns
from sensiv.data.subsets import IndicatorCounts, count_frames, count_kept, counted_columns
from sensiv.estimation.absorb_view import GroupAbsorbed, GroupStats, demean_chunks
from sensiv.estimation.cluster_moments import (ClusterMoments, Gatherer, gathering, merged,
                                               recall, remember, scores_from)
from sensiv.estimation.cells import Cells, count_cells
from sensiv.estimation.cluster_ways import combine_ways, pair_labels
from sensiv.estimation.label_codes import cluster_label_columns
from sensiv.estimation.moments import (Moments, ScoreBlock, ScoreSums, accumulate,
                                       cluster_score_sums, empty_moments,
                                       score_sums as sums_of)

CONNECT_SECONDS = 10
"""How long a ``--scheduler`` address may take to answer."""

_CLIENTS: dict[str | None, Any] = {}


def close_clients() -> None:
    """Close every client this process opened (and the local clusters it started)."""
    for scheduler, client in list(_CLIENTS.items()):
        cluster = client.cluster if scheduler is None else None
        client.close()
        if cluster is not None:
            cluster.close()
    _CLIENTS.clear()


def client_of(scheduler: str | None) -> Any:
    """A Dask client: connected to ``scheduler``; without one, the client the caller opened,
    else a local cluster started for this process (one worker per core); InputError if the
    address does not answer."""
    if scheduler in _CLIENTS:
        return _CLIENTS[scheduler]
    try:
        from distributed import Client, LocalCluster, default_client
    except ImportError as exc:
        raise missing_extra("dask") from exc
    if scheduler is None:
        try:
            return default_client()     # a client the caller opened already
        except ValueError:
            pass
        cluster = LocalCluster(n_workers=os.cpu_count() or 1, threads_per_worker=1,
                               processes=True, dashboard_address=None)
        client = Client(cluster)
    else:
        try:
            client = Client(scheduler, timeout=f"{CONNECT_SECONDS}s")
        except (OSError, TimeoutError, ValueError) as exc:
            raise InputError(f"--scheduler {scheduler!r}: no Dask scheduler answered within "
                             f"{CONNECT_SECONDS} s ({exc}); start one with 'dask scheduler' "
                             "and give its address (tcp://host:8786), or drop --scheduler to "
                             "use a local cluster") from exc
    if not _CLIENTS:
        atexit.register(close_clients)
    _CLIENTS[scheduler] = client
    return client


def _split(source, client: Any) -> tuple[Any, Any, str | None]:
    """The source of raw rows, the level means (a future broadcast to every worker, ``None``
    without an absorbed fixed effect) and the fixed effect's name."""
    if not isinstance(source, GroupAbsorbed):
        return source, None, None
    return (source.base, client.scatter(source.stream, broadcast=True, hash=False),
            source.spec.absorb[0])


def _parts(source, client: Any) -> list[tuple[Any, Any]]:
    """``(source, frames)`` per partition: the raw frames of one file each, a partition of a
    Dask DataFrame (a future of its frame) each, or one clean in-memory chunk each
    (``frames=None``) for sources without files."""
    if source.origin is not None and source.origin.kind == "dask":
        frame = source.origin.frame[read_columns(source.spec)]
        return [(source.stripped(), future) for future in client.compute(frame.to_delayed())]
    if source.origin is None or source.origin.kind == "duckdb":
        return [(chunk, None) for chunk in source.chunks()]
    return [(source, frames) for frames in partition_frames(source)]


def _raw_chunks(part: Any, frames: Any, tally: Tally):
    if hasattr(frames, "columns"):           # one partition of a Dask DataFrame
        return clean_chunks(part, [frames], tally)
    if frames is None:
        tally.add(part.values.shape[0] + part.n_dropped, part.values.shape[0], {},
                  part.n_filtered)
        return [part]
    return clean_chunks(part, frames(), tally)


def _chunks(part: Any, frames: Any, tally: Tally, absorbed: tuple | None = None):
    """The clean chunks of one partition, demeaned by ``absorbed`` = (stream, fixed effect,
    description) when one fixed effect is absorbed."""
    chunks = _raw_chunks(part, frames, tally)
    if absorbed is None:
        return chunks
    return demean_chunks(chunks, *absorbed)


def _counts(tally: Tally) -> tuple[int, int, int, dict[str, int]]:
    return tally.rows, tally.kept, tally.filtered, dict(tally.missing)


def part_moments(part: Any, frames: Callable | None, spec, description: str,
                 columns: Sequence[str], absorbed: tuple | None = None,
                 gather: bool = False) -> tuple[Moments, tuple, ClusterMoments | None]:
    """Task: the moments and row counts of one partition, and with ``gather`` its clusters'
    moment matrices (:mod:`sensiv.estimation.cluster_moments`)."""
    tally = Tally(spec, description)
    gatherer = Gatherer(len(columns)) if gather else None
    moments = accumulate(_chunks(part, frames, tally, absorbed) if gatherer is None else
                         gathering(_chunks(part, frames, tally, absorbed), gatherer), columns)
    clusters = gatherer.result() if gatherer is not None and moments.n else None
    return moments, _counts(tally), (clusters, gather and not moments.n)


def _added_counts(c1: tuple, c2: tuple) -> tuple:
    """Two partitions' row counts (:func:`_counts`) added."""
    missing = {k: c1[3].get(k, 0) + c2[3].get(k, 0) for k in {*c1[3], *c2[3]}}
    return c1[0] + c2[0], c1[1] + c2[1], c1[2] + c2[2], missing


def _finish_counts(origin, source, counts: tuple) -> None:
    """The whole-data checks of ``source`` on the merged row counts, where the raw rows'
    ``origin`` is files or a Dask frame (in-memory chunks were checked when they were made)."""
    if origin is not None and origin.kind != "duckdb":
        rows, kept, filtered, missing = counts
        tally = Tally(source.spec, source.description)
        tally.add(rows, kept, missing, filtered)
        tally.finish()


def merge_moments(left: tuple, right: tuple) -> tuple:
    (m1, c1, g1), (m2, c2, g2) = left, right
    # a partition without rows gathers nothing and leaves the other's matrices as they are
    clusters = g2 if g1[1] else g1 if g2[1] else (merged(g1[0], g2[0]), False)
    return m1 + m2, _added_counts(c1, c2), clusters


def _tree(client: Any, leaves: list, merge: Callable) -> Any:
    """Pairwise tree reduction of futures on the cluster; the merged result (a progress bar
    over the partitions on a terminal's stderr while they run; none under ``--json``)."""
    from distributed import as_completed

    with Progress(total=len(leaves), label="dask partitions") as bar:
        for done, _ in enumerate(as_completed(leaves), start=1):
            bar.update(done)
    level = leaves
    while len(level) > 1:
        paired = [client.submit(merge, level[i], level[i + 1], pure=False)
                  for i in range(0, len(level) - 1, 2)]
        level = paired + ([level[-1]] if len(level) % 2 else [])
    return level[0].result()


def moments(source, columns: Sequence[str]) -> Moments:
    """Pass 1 on Dask; the same :class:`Moments` as the numpy stream."""
    client = client_of(source.scheduler)
    base, stream, effect = _split(source, client)
    absorbed = None if stream is None else (stream, effect, source.description)
    gather = stream is None and len(cluster_columns(base.spec)) == 1
    leaves = [client.submit(part_moments, part, frames, base.spec, source.description,
                            tuple(columns), absorbed, gather, pure=False)
              for part, frames in _parts(base, client)]
    remember(source, None)
    if not leaves:
        return empty_moments(columns)
    total, counts, (clusters, _) = _tree(client, leaves, merge_moments)
    remember(source, clusters)
    _finish_counts(base.origin, source, counts)
    return total


def _ways(chunks: list) -> list[list]:
    """The chunks once per cluster way: as they are (one way), or with the labels of ``A``,
    of ``B`` and of the pairs ``A∩B`` (two-way)."""
    if not chunks or np.ndim(chunks[0].clusters) == 1:
        return [chunks]
    return [[dataclasses.replace(c, clusters=labels(c.clusters)) for c in chunks]
            for labels in (lambda k: k[:, 0], lambda k: k[:, 1],
                           lambda k: pair_labels(k[:, 0], k[:, 1]))]


def part_scores(part: Any, frames: Callable | None, spec, description: str, mean: np.ndarray,
                blocks: Sequence[ScoreBlock], cluster: bool, absorbed: tuple | None = None
                ) -> Any:
    """Task: robust meats (a dict) or per-cluster sums (a dict of labelled frames, keyed by
    way and block)."""
    import pandas as pd

    chunks = _chunks(part, frames, Tally(spec, description), absorbed)
    if not cluster:
        return sums_of(chunks, mean, blocks, False).meats
    out = {}
    for way, way_chunks in enumerate(_ways([c for c in chunks if c.values.shape[0]])):
        labels, sums = cluster_score_sums(way_chunks, mean, blocks)
        index = pd.Index(labels, dtype=object, tupleize_cols=False)
        out |= {(way, name): pd.DataFrame(s, index=index) for name, s in sums.items()}
    return out


def merge_scores(left: dict, right: dict) -> dict:
    """Robust meats add; per-cluster sums add by label (a group-by sum)."""
    import pandas as pd

    out = {}
    for name in {*left, *right}:
        value, other = left.get(name), right.get(name)
        if value is None or other is None:      # a partition without rows has no ways
            out[name] = value if other is None else other
        elif isinstance(value, pd.DataFrame):
            out[name] = pd.concat([value, other]).groupby(level=0, sort=False).sum()
        else:
            out[name] = value + other
    return out


def score_sums(source, mean: np.ndarray, blocks: Sequence[ScoreBlock], cluster: bool
               ) -> ScoreSums:
    """Pass 2 on Dask; the same :class:`ScoreSums` as the numpy stream (robust, one- or
    two-way cluster sums)."""
    gathered = recall(source, len(mean)) if cluster else None
    if gathered is not None:
        return combine_ways([scores_from(gathered, mean, blocks)])
    client = client_of(source.scheduler)
    base, stream, effect = _split(source, client)
    absorbed = None if stream is None else (stream, effect, source.description)
    leaves = [client.submit(part_scores, part, frames, base.spec, source.description, mean,
                            tuple(blocks), cluster, absorbed, pure=False)
              for part, frames in _parts(base, client)]
    merged = _tree(client, leaves, merge_scores)
    if not cluster:
        return ScoreSums({k: 0.5 * (v + v.T) for k, v in merged.items()}, None)
    ways = sorted({way for way, _ in merged})
    return combine_ways([{b.name: merged[(way, b.name)].to_numpy(dtype=np.float64)
                          for b in blocks} for way in ways])


# --------------------------------------------------------------------------- marker counts
def part_indicator(frames: Any, column: str, row_filter) -> IndicatorCounts:
    """Task: the counts of a 0/1 column among one partition's kept rows (a frame, or a
    factory of them)."""
    if hasattr(frames, "columns"):           # one partition of a Dask DataFrame
        return count_kept(frames, column, row_filter)
    return count_frames(frames, column, row_filter)


def indicator_counts(source, column: str) -> IndicatorCounts:
    """The counts of a 0/1 marker column over the rows the row filter keeps, per partition on
    the cluster."""
    client = client_of(source.scheduler)
    origin, kept = source.origin, source.row_filter
    columns = counted_columns(column, kept)
    if origin.kind == "dask":
        parts = client.compute(origin.frame[columns].to_delayed())
    else:
        parts = column_frames(origin, columns, source.chunk_rows)
    leaves = [client.submit(part_indicator, part, column, kept, pure=False) for part in parts]
    return _tree(client, leaves, IndicatorCounts.__add__)


# --------------------------------------------------------------------------- discrete cells
def part_cells(part: Any, frames: Callable | None, spec, description: str,
               limits: tuple[int, int, int]) -> tuple[Cells, tuple]:
    """Task: the cell counts (:func:`~sensiv.estimation.cells.count_cells`) and row counts of
    one partition."""
    tally = Tally(spec, description)
    return count_cells(_chunks(part, frames, tally), limits), _counts(tally)


def merge_cells(left: tuple, right: tuple) -> tuple:
    (a, c1), (b, c2) = left, right
    return a + b, _added_counts(c1, c2)


def cells(source, limits: Sequence[int]) -> Cells:
    """The discrete tabulation on Dask: per-partition cell counts, merged in the tree."""
    limits = tuple(int(v) for v in limits)
    client = client_of(source.scheduler)
    leaves = [client.submit(part_cells, part, frames, source.spec, source.description, limits,
                            pure=False) for part, frames in _parts(source, client)]
    if not leaves:
        return Cells({}, ((), (), ()), limits)
    found, counts = _tree(client, leaves, merge_cells)
    _finish_counts(source.origin, source, counts)
    return found


# --------------------------------------------------------------------------- absorbed levels
def _level_frame(chunk) -> Any:
    """Per-level sums of one clean chunk: rows ``n``, weights ``w``, weighted sums ``s{j}``,
    extremes ``lo{j}`` / ``hi{j}``, a cluster label ``c{k}`` and ``u{k}`` (one cluster only)."""
    import pandas as pd

    n, p = chunk.values.shape
    w = np.ones(n) if chunk.weights is None else chunk.weights
    data: dict[str, Any] = {"n": np.ones(n, dtype=np.int64), "w": w}
    for j in range(p):
        data[f"s{j}"] = chunk.values[:, j] * w
        data[f"lo{j}"] = data[f"hi{j}"] = chunk.values[:, j]
    columns = [] if chunk.clusters is None else cluster_label_columns(chunk.clusters)
    for k, column in enumerate(columns):
        data[f"c{k}"], data[f"u{k}"] = column, np.ones(n, dtype=bool)
    return _reduce_levels(pd.DataFrame(data, index=pd.Index(chunk.groups[0])))


def _reduce_levels(frame: Any) -> Any:
    """Rows of the same level merged: sums add, extremes extend, ``u{k}`` stays true only while
    the level meets one cluster label."""
    grouped = frame.groupby(level=0, sort=False)
    rules = {c: ("sum" if c[0] in "nws" else "min" if c.startswith("lo") else
                 "max" if c.startswith("hi") else "first" if c[0] == "c" else "all")
             for c in frame.columns}
    out = grouped.agg(rules)
    for c in frame.columns:
        if c[0] == "c":
            out[f"u{c[1:]}"] &= grouped[c].nunique().to_numpy() == 1
    return out


def part_levels(part: Any, frames: Callable | None, spec, description: str) -> Any:
    """Task: the per-level sums of one partition (``None`` when it has no rows)."""
    import pandas as pd

    pieces = [_level_frame(c) for c in _chunks(part, frames, Tally(spec, description))
              if c.values.shape[0]]
    return _reduce_levels(pd.concat(pieces)) if pieces else None


def merge_levels(left: Any, right: Any) -> Any:
    import pandas as pd

    if left is None or right is None:
        return right if left is None else left
    return _reduce_levels(pd.concat([left, right]))


def group_stats(source) -> GroupStats:
    """Pass 0 of one absorbed fixed effect on Dask: per-level sums per partition, merged by
    label in a tree."""
    client = client_of(source.scheduler)
    leaves = [client.submit(part_levels, part, frames, source.spec, source.description,
                            pure=False) for part, frames in _parts(source, client)]
    merged = _tree(client, leaves, merge_levels) if leaves else None
    if merged is None:
        raise InputError(f"{source.description} has no usable rows; supply data with at least "
                         "one complete row")
    p = sum(1 for c in merged.columns if c.startswith("lo"))
    ways = sum(1 for c in merged.columns if c.startswith("u"))
    totals = merged["w"].to_numpy(dtype=np.float64)
    sums = merged[[f"s{j}" for j in range(p)]].to_numpy(dtype=np.float64)
    single = (merged[[f"u{k}" for k in range(ways)]].to_numpy(dtype=bool) if ways else None)
    return GroupStats(merged.index, merged["n"].to_numpy(dtype=np.int64), totals,
                      sums / totals[:, None],
                      merged[[f"lo{j}" for j in range(p)]].to_numpy(dtype=np.float64),
                      merged[[f"hi{j}" for j in range(p)]].to_numpy(dtype=np.float64), single)
