"""The validated, restartable stream of clean numeric chunks that every layer below reads.

This is the boundary: everything below it receives finite ``float64`` arrays and never checks
its inputs again.  A :class:`Source` turns frames (from a file reader or a pandas frame, see
:mod:`sensiv.data.readers`) into :class:`Chunk` objects whose columns follow
:attr:`Layout.columns`.

Missing values are handled listwise: a row with a missing value in any used column is dropped
and counted.  Text controls are expanded to 0/1 indicator columns with the first level (in
``str`` order) dropped; the levels are fixed once for the whole data set so that every chunk
has the same columns.

Examples
--------
>>> import pandas as pd
>>> from sensiv.data import Spec, from_frame
>>> frame = pd.DataFrame({"y": [1.0, 2.0, None, 4.0], "x": [0.5, 1.0, 1.5, 2.0],
...                       "z": [1, 0, 1, 0], "region": ["b", "a", "a", "c"]})
>>> source = from_frame(frame, Spec("y", ["x"], ["z"], controls=["region"]))
>>> source.layout.columns
('y', 'x', 'z', 'region[b]', 'region[c]')
>>> chunk = next(source.chunks())
>>> chunk.values.shape, chunk.n_dropped
((3, 5), 1)
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Iterable, Iterator, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import warnings

import numpy as np

from sensiv.core.errors import IdentifierWarning, InputError
from sensiv.data.convert import (as_float, data_row, dtype_kind, identifier_notes, level_index,
                                 level_strings, missing_mask, scan_levels, Tally, text_controls)
from sensiv.data.columnar import check_weights, checked_column, cleaned, label_columns
from sensiv.data.dense_size import check_dense_size
from sensiv.data.spec import check_columns, cluster_columns, roles, row_filter, Spec
from sensiv.data.where import check_kinds, filter_columns, keep_mask, Node

if TYPE_CHECKING:
    import pandas as pd


@dataclass(frozen=True, slots=True)
class Layout:
    """The numeric design after text controls are expanded to indicators.

    ``controls`` holds numeric control names in the order of ``Spec.controls``, with each
    text control replaced in place by its indicators ``f"{column}[{level}]"``.
    ``categorical`` pairs each text control with its kept levels (sorted as ``str``, first
    level dropped).
    """

    outcome: str
    treatments: tuple[str, ...]
    instruments: tuple[str, ...]
    controls: tuple[str, ...]
    categorical: tuple[tuple[str, tuple[str, ...]], ...]
    constant: bool

    @property
    def columns(self) -> tuple[str, ...]:
        """Column order of :attr:`Chunk.values`: outcome, treatments, instruments, controls."""
        return (self.outcome, *self.treatments, *self.instruments, *self.controls)


@dataclass(frozen=True, slots=True)
class Chunk:
    """Clean rows: ``values`` is ``(rows, len(layout.columns))`` float64, column-major
    (Fortran-contiguous: each column is one contiguous block, as the moments read them), finite.

    ``weights`` (all > 0) and ``clusters`` (no missing) are row-aligned with ``values`` or
    ``None``; ``clusters`` has shape ``(rows,)`` for one cluster variable and ``(rows, 2)``
    for two-way clustering; ``n_dropped`` counts rows of this chunk dropped for a missing value and
    ``n_filtered`` the rows removed before that by the row filter (``Spec.where``).  A chunk
    may have zero rows when all of its rows were dropped.
    """

    values: np.ndarray
    weights: np.ndarray | None
    clusters: np.ndarray | None
    n_dropped: int
    n_filtered: int = 0
    groups: tuple[np.ndarray, ...] | None = None
    """Labels of each absorbed fixed effect (``Spec.absorb``), row-aligned, or ``None``."""


@dataclass(frozen=True, slots=True)
class Source:
    """A validated data set that can be read, chunk by chunk, any number of times.

    Build one with :func:`sensiv.data.from_frame`, :func:`~sensiv.data.from_file`,
    :func:`~sensiv.data.from_chunks` or :func:`~sensiv.data.load`.
    """

    spec: Spec
    layout: Layout
    description: str
    _frames: Callable[[], Iterator[pd.DataFrame]] = field(repr=False, compare=False)
    _levels: dict[str, tuple[str, ...]] = field(repr=False, compare=False)
    # In-memory sources that are not re-read from their frame (``_resident``) keep the chunks
    # they validated, so later passes do not convert again.
    _cache: tuple[Chunk, ...] | None = field(default=None, repr=False, compare=False)
    # The parsed row filter and the kind ("numeric" / "text") of each column it reads.
    _filter: tuple[Node, dict[str, str]] | None = field(default=None, repr=False, compare=False)
    notes: tuple[str, ...] = ()
    """Conditions found while reading the data that a report should carry (e.g. a control
    that looks like an identifier)."""
    origin: Any = None
    """Where the raw rows live (:class:`sensiv.data.datasets.Origin`) for engines that read
    files themselves; ``None`` for in-memory frames and Stata files."""
    engine: str = "numpy"
    """The engine that runs the passes over the rows: ``numpy``, ``duckdb`` or ``dask``."""
    scheduler: str | None = None
    """Address of a running Dask scheduler (``engine="dask"``); ``None`` starts a local one."""
    chunk_rows: int | None = None
    """Rows per chunk when streaming from files."""
    # The fast path (sensiv.data.columnar): a factory of per-chunk arrays of the used
    # columns, and whether the next chunk is read on a worker thread.
    _columns: Callable[[], Iterator[Sequence[np.ndarray]]] | None = field(
        default=None, repr=False, compare=False)
    _ahead: bool = field(default=False, repr=False, compare=False)
    # An in-memory frame of plain numeric columns: validated once, then re-read from the
    # frame's own arrays at every pass (one chunk at a time) instead of kept as a copy.
    _resident: bool = field(default=False, repr=False, compare=False)

    @property
    def frames(self) -> Callable[[], Iterator[pd.DataFrame]]:
        """Factory of raw frame iterators over the used columns (before any cleaning)."""
        return self._frames

    @property
    def levels(self) -> dict[str, tuple[str, ...]]:
        """All levels of each text control, sorted; the first is the baseline the layout drops."""
        return dict(self._levels)

    @property
    def row_filter(self) -> tuple[Node, dict[str, str]] | None:
        """The parsed row filter and the kind of each column it reads, or ``None``."""
        return self._filter

    def stripped(self) -> Source:
        """A copy without its rows or readers (only what cleaning a frame needs), to send to
        the workers of a cluster together with the frames of one partition."""
        return dataclasses.replace(self, _frames=_no_frames, _cache=None, origin=None,
                                   _columns=None, _resident=False)

    @property
    def in_memory(self) -> bool:
        """Whether the validated chunks are held in memory (a frame) rather than re-read."""
        return self._cache is not None or self._resident

    def keep(self, frame: pd.DataFrame) -> np.ndarray:
        """Mask of the rows of a raw frame that the row filter keeps (all without one)."""
        if self._filter is None:
            return np.ones(len(frame), dtype=bool)
        return keep_mask(self._filter[0], frame, self._filter[1])

    def chunks(self) -> Iterator[Chunk]:
        """Yield clean chunks from the first row on; each call starts again.

        Raises
        ------
        InputError
            Bad values found in a chunk (raised when that chunk is reached), or, after the
            last chunk, a column with no values or no rows left.
        """
        if self._cache is not None:
            yield from self._cache
            return
        tally = Tally(self.spec, self.description)
        if self._columns is not None:
            for item in cleaned(self._columns(), self.spec, self.description,
                                ahead=self._ahead):
                tally.add(item.rows, item.kept, item.missing)
                yield Chunk(item.values, item.weights, item.clusters, item.rows - item.kept,
                            0, item.groups)
        else:
            yield from clean_chunks(self, self._frames(), tally)
        tally.finish()


def _no_frames() -> Iterator[pd.DataFrame]:
    return iter(())


def clean_chunks(source: Source, frames: Iterable[pd.DataFrame], tally: Tally
                 ) -> Iterator[Chunk]:
    """Clean chunks of raw ``frames`` of ``source`` (e.g. one partition), counted in
    ``tally``; the checks over the whole data set (``tally.finish()``) are the caller's."""
    for frame in frames:
        yield _to_chunk(frame, source, tally)


def _numeric_columns(frame: pd.DataFrame, source: Source, first_row: int) -> tuple[
        dict[str, np.ndarray], dict[str, int], np.ndarray]:
    """Numeric columns as float64, missing counts per column and the listwise drop mask."""
    spec, where = source.spec, source.description
    missing_counts: dict[str, int] = {}
    drop = np.zeros(len(frame), dtype=bool)
    numeric: dict[str, np.ndarray] = {}
    labels = set(label_columns(spec))
    for role, name in roles(spec):
        if name in source._levels or name in labels:
            mask = missing_mask(frame[name])
        else:
            column = numeric[name] = as_float(frame[name], role, name, where, first_row)
            mask = checked_column(column, role, name, where, first_row)
            if mask is None:
                missing_counts[name] = 0
                continue
        missing_counts[name] = int(mask.sum())
        drop |= mask
    if spec.weight is not None:
        check_weights(spec, numeric[spec.weight], where, first_row)
    return numeric, missing_counts, drop


def _filtered(frame: pd.DataFrame, source: Source) -> tuple[pd.DataFrame, int]:
    """The rows of ``frame`` kept by the row filter and the number removed."""
    if source._filter is None:
        return frame, 0
    mask = source.keep(frame)
    removed = int((~mask).sum())
    return (frame[mask] if removed else frame), removed


def _to_chunk(frame: pd.DataFrame, source: Source, tally: Tally) -> Chunk:
    frame, n_filtered = _filtered(frame, source)
    try:
        return _clean_chunk(frame, source, tally, n_filtered)
    except InputError as exc:
        if source._filter is None:
            raise
        raise InputError(f"{exc} (data rows are counted among the rows kept by the row "
                         f"filter {source.spec.where!r})") from exc


def _clean_chunk(frame: pd.DataFrame, source: Source, tally: Tally, n_filtered: int) -> Chunk:
    spec, layout, where = source.spec, source.layout, source.description
    first_row = tally.rows
    numeric, missing_counts, drop = _numeric_columns(frame, source, first_row)
    keep = ~drop
    n_kept = int(keep.sum())
    tally.add(len(frame), n_kept, missing_counts, n_filtered)

    # Column-major: every column is written (and later read) as one contiguous block.
    values = np.empty((n_kept, len(layout.columns)), dtype=np.float64, order="F")
    j = 0
    everything = n_kept == len(frame)
    for name in (spec.outcome, *spec.treatments, *spec.instruments, *spec.controls):
        if name not in source._levels:
            values[:, j] = numeric[name] if everything else numeric[name][keep]
            j += 1
            continue
        levels = source._levels[name]
        labels = level_strings(frame[name][keep], name in spec.categorical)
        codes = np.asarray(level_index(levels).get_indexer(labels))
        if (codes < 0).any():
            unknown = labels[int(np.argmax(codes < 0))]
            raise InputError(
                f"control {name!r} in {where} has level {unknown!r} in rows "
                f"{data_row(first_row, 0)}-{data_row(first_row, len(frame) - 1)} that was "
                f"absent when the levels {list(levels)} were scanned; the data changed between "
                "passes: reload it"
            )
        for code in range(1, len(levels)):
            values[:, j] = codes == code
            j += 1
    weights = clusters = None
    if spec.weight is not None:
        weights = np.ascontiguousarray(numeric[spec.weight][keep], dtype=np.float64)
    names = cluster_columns(spec)
    if len(names) == 1:
        clusters = frame[names[0]].to_numpy()[keep]
    elif names:  # two-way: one column of labels per cluster variable
        clusters = frame[list(names)].to_numpy()[keep]
    groups = None
    if spec.absorb:
        groups = tuple(frame[name].to_numpy()[keep] for name in spec.absorb)
    return Chunk(values, weights, clusters, len(frame) - n_kept, n_filtered, groups)


def _filter_kinds(spec: Spec, samples: Sequence[pd.DataFrame], text: list[str],
                  description: str) -> tuple[Node, dict[str, str]] | None:
    """The parsed filter with each of its columns' kind, checked against the comparisons."""
    tree = row_filter(spec)
    if tree is None:
        return None
    kinds = {}
    for name in filter_columns(tree):
        found = {dtype_kind(sample[name].dtype) for sample in samples}
        if name in text and name not in spec.categorical:
            found = {"text"}
        kinds[name] = ("other" if "other" in found else "text" if "text" in found
                       else "numeric")
    check_kinds(tree, kinds, spec.where or "", description)
    return tree, kinds


def build_source(spec: Spec, description: str, available: Sequence[Any],
                 samples: Callable[[], Sequence[pd.DataFrame]],
                 make_frames: Callable[[list[str]], Callable[[], Iterator[pd.DataFrame]]],
                 *, eager: bool, chunk_rows: int | None = None,
                 columns: Callable[[], Iterator[Sequence[np.ndarray]]] | None = None,
                 ahead: bool = False) -> Source:
    """The steps every reader shares: column names, kinds, levels and layout.

    Parameters
    ----------
    spec : Spec
    description : str
        How messages name the data set (a file name, ``"DataFrame"``).
    available : sequence
        The data set's column names.
    samples : callable
        Returns the leading frames from which the kinds of the columns are decided.
    make_frames : callable
        Given the text controls, returns a factory of fresh frame iterators over the used
        columns.
    eager : bool
        Convert and validate every row now and keep the chunks (in-memory data).
    chunk_rows : int, optional
        Rows per streamed chunk, for the check that one chunk's design fits in memory.
    columns : callable, optional
        The fast path (:mod:`sensiv.data.columnar`): a factory of per-chunk arrays of the
        used columns, read instead of the frames when no text control turned up.
    ahead : bool
        Read the fast path's next chunk on a worker thread.
    """
    if not isinstance(spec, Spec):
        raise InputError(f"spec must be a sensiv.data.Spec; got {type(spec).__name__}")
    check_columns(spec, available, description)
    sampled = samples()
    text = text_controls(spec, sampled, description)
    row_filter_kinds = _filter_kinds(spec, sampled, text, description)
    text_filter = [name for name, kind in (row_filter_kinds or (None, {}))[1].items()
                   if kind == "text" and name not in text]
    frames = make_frames(text + text_filter)
    notes = identifier_notes(spec, sampled, text, description)
    for note in notes:
        warnings.warn(note, IdentifierWarning, stacklevel=3)
    keep = None
    if row_filter_kinds is not None:
        def keep(frame: pd.DataFrame) -> np.ndarray:
            return keep_mask(row_filter_kinds[0], frame, row_filter_kinds[1])
    levels = scan_levels(frames, spec, text, description, keep) if text else {}
    controls: list[str] = []
    for name in spec.controls:
        controls += [f"{name}[{level}]" for level in levels[name][1:]] if name in levels else [name]
    layout = Layout(spec.outcome, spec.treatments, spec.instruments, tuple(controls),
                    tuple((name, levels[name][1:]) for name in text), spec.constant)
    clash = {name for name in layout.columns if layout.columns.count(name) > 1}
    clash |= set(controls) & ({*cluster_columns(spec), spec.weight} - {None})
    if clash:
        raise InputError(
            f"indicator column name(s) {sorted(clash)} in {description} clash with other "
            "columns; rename the text control or the clashing column"
        )
    if eager or chunk_rows is not None:
        rows = sum(len(sample) for sample in sampled) if eager else chunk_rows
        check_dense_size(len(layout.columns) + 1, rows, levels, description,
                         streamed=not eager)
    source = Source(spec, layout, description, frames, levels, None, row_filter_kinds,
                    tuple(notes), _columns=None if text else columns, _ahead=ahead)
    if eager and source._columns is not None:
        # Plain numeric columns: every row is validated now, but the chunks are not kept.
        # Re-reading a chunk of the frame's arrays costs one copy of it (its pages reused
        # from the previous chunk's), while keeping them all costs a float64 copy of the
        # used columns and the first touch of every one of its pages (measured at 1e6 x 58
        # columns: 0.04 s per pass against 1.1 s and 0.46 GB to build the copy).
        for _ in source.chunks():
            pass
        return dataclasses.replace(source, _resident=True)
    if eager:
        return dataclasses.replace(source, _cache=tuple(source.chunks()))
    return source
