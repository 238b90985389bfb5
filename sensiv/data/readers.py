"""Readers: CSV (also gzipped), Parquet and Stata ``.dta`` files, and pandas frames, each turned
into a validated :class:`~sensiv.data.source.Source`.

:func:`from_file` streams a file in chunks (memory grows with the chunk, not the file) and reads
only the used columns; :func:`from_frame` and :func:`from_chunks` validate in-memory frames at
once; :func:`load` picks one of them; :func:`read_table` reads a whole file into a frame.
Parser failures become :class:`~sensiv.core.errors.InputError` messages that name the file.

Examples
--------
>>> import pandas as pd
>>> frame = pd.DataFrame({"y": [1.0, 2.0, 4.0], "x": [0.5, 1.0, 2.0], "z": [1, 0, 0]})
>>> source = load(frame, Spec("y", ["x"], ["z"]))
>>> source.description, source.layout.columns
('DataFrame', ('y', 'x', 'z'))
"""

from __future__ import annotations

import dataclasses
import os
import struct
from collections.abc import Callable, Iterator, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from sensiv.core.errors import InputError
from sensiv.data.columnar import arrow_fast_columns, batch_arrays, fast_columns, numpy_kind
from sensiv.data.datasets import Origin, from_dask, from_dataset, is_dask_frame, is_dataset
from sensiv.data.source import Source, build_source
from sensiv.data.spec import Spec, cluster_columns, read_columns

if TYPE_CHECKING:
    import pandas as pd

DEFAULT_CHUNK_ROWS = 100_000
"""Rows per chunk when streaming from a file."""

TYPE_SAMPLE_ROWS = 100_000
"""Leading rows read from a file to decide which controls are text before streaming."""

PARQUET_BUFFER_BYTES = 1 << 20
"""Read buffer for streaming Parquet column chunks."""

_FORMATS: tuple[tuple[str, str], ...] = (
    (".csv", "csv"),
    (".csv.gz", "csv"),
    (".parquet", "parquet"),
    (".pq", "parquet"),
    (".dta", "stata"),
)
ACCEPTED_SUFFIXES = tuple(suffix for suffix, _ in _FORMATS)
_FORMAT_NAMES = {"csv": "CSV", "parquet": "Parquet", "stata": "Stata .dta"}
# Stata's numbers are the data: value labels and date formats are not applied, so that a
# labelled 0/1 treatment stays numeric and a file gives the same values however it is read.
_STATA_OPTIONS = {"convert_categoricals": False, "convert_dates": False}


# --------------------------------------------------------------------------- frames
def _check_chunk_rows(chunk_rows: Any) -> int:
    if isinstance(chunk_rows, bool) or not isinstance(chunk_rows, (int, np.integer)) \
            or chunk_rows < 1:
        raise InputError(f"chunk_rows must be a positive integer; got {chunk_rows!r}")
    return int(chunk_rows)


def _check_frame(frame: Any, what: str) -> None:
    import pandas as pd

    if not isinstance(frame, pd.DataFrame):
        raise InputError(f"{what} must be a pandas DataFrame; got {type(frame).__name__}")


FRAME_CHUNK_ROWS = 65_536
"""Rows per validated chunk of an in-memory frame (``chunk_rows=None``): the conversion and
the passes work on blocks that stay in the processor's caches, instead of three whole-frame
copies (a column subset, the numeric columns, the block) at once.  A frame of plain numeric
columns is re-read chunk by chunk from its own arrays at every pass (the source holds no copy
of its rows); otherwise the cleaned chunks are kept (one float64 copy of the used columns)."""


def from_frame(frame: pd.DataFrame, spec: Spec, *, chunk_rows: int | None = None,
               description: str = "DataFrame") -> Source:
    """In-memory source, validated in chunks of ``chunk_rows`` rows (default
    :data:`FRAME_CHUNK_ROWS`).

    ``description`` names the data in messages (e.g. the file the frame was read from).

    Every row is validated here, so a bad value raises now rather than later.  A frame whose
    used columns are all plain numbers is read again from its own arrays at every pass: do
    not modify it while the source is in use.

    Raises
    ------
    InputError
        Unknown column, non-numeric, infinite or NaN-only column, bad weights, or no rows left.
    """
    _check_frame(frame, "frame")
    rows = FRAME_CHUNK_ROWS if chunk_rows is None else _check_chunk_rows(chunk_rows)
    used = read_columns(spec) if isinstance(spec, Spec) else []

    def make_frames(text: list[str]) -> Callable[[], Iterator[pd.DataFrame]]:
        def frames() -> Iterator[pd.DataFrame]:
            # Slice rows first: a column subset of the whole frame would copy all of it.
            for start in range(0, len(frame), rows):
                yield frame.iloc[start:start + rows][used]
            if len(frame) == 0:
                yield frame[used]
        return frames

    return build_source(spec, description, list(frame.columns), lambda: [frame], make_frames,
                        eager=True, columns=_frame_columns(frame, spec, rows))


def _frame_columns(frame: pd.DataFrame, spec: Any, rows: int
                   ) -> Callable[[], Iterator[list[np.ndarray]]] | None:
    """The fast path's chunks of a frame whose used columns are numpy numbers: slices of
    each column's array (no frame copy), or ``None`` for the general path."""
    if not isinstance(spec, Spec) or len(frame) == 0 or not frame.columns.is_unique:
        return None
    kinds = {name: numpy_kind(frame[name].dtype) for name in read_columns(spec)
             if name in frame.columns}
    names = fast_columns(spec, kinds)
    if names is None:
        return None

    def batches() -> Iterator[list[np.ndarray]]:
        arrays = [frame[name].to_numpy() for name in names]
        for start in range(0, len(frame), rows):
            yield [array[start:start + rows] for array in arrays]
    return batches


def from_chunks(frames: Sequence[pd.DataFrame], spec: Spec) -> Source:
    """In-memory source from frames that are consecutive chunks of one data set.

    A control that is text in any frame is text throughout; levels come from all frames.
    """
    if not isinstance(frames, Sequence) or len(frames) == 0:
        raise InputError("from_chunks needs a non-empty list of DataFrames; got "
                         f"{type(frames).__name__} {frames!r:.60}")
    for index, frame in enumerate(frames):
        _check_frame(frame, f"frames[{index}]")
    description = f"DataFrame chunks ({len(frames)})"
    common = [name for name in frames[0].columns
              if all(name in frame.columns for frame in frames[1:])]
    used = read_columns(spec) if isinstance(spec, Spec) else []

    def make_frames(text: list[str]) -> Callable[[], Iterator[pd.DataFrame]]:
        return lambda: (frame[used] for frame in frames)

    return build_source(spec, description, common, lambda: list(frames), make_frames, eager=True)


# --------------------------------------------------------------------------- files
def _file(path: Any) -> tuple[Path, str]:
    """Resolve ``path`` and its format, or raise InputError."""
    try:
        resolved = Path(os.fspath(path))
    except TypeError as exc:
        raise InputError(f"expected a file path; got {type(path).__name__} {path!r:.60}; "
                         f"pass the path of a {', '.join(ACCEPTED_SUFFIXES)} file") from exc
    if not resolved.exists():
        raise InputError(f"data file '{resolved}' does not exist; check the path "
                         f"(relative paths start at {Path.cwd()})")
    if resolved.is_dir():
        raise InputError(f"'{resolved}' is a directory, not a data file; give the path of a "
                         f"{', '.join(ACCEPTED_SUFFIXES)} file")
    lower = resolved.name.lower()
    for suffix, fmt in sorted(_FORMATS, key=lambda item: -len(item[0])):
        if lower.endswith(suffix):
            return resolved, fmt
    raise InputError(
        f"unsupported file type {''.join(resolved.suffixes) or '(no suffix)'!r} for "
        f"'{resolved.name}'; accepted: {', '.join(ACCEPTED_SUFFIXES)}; convert the file or "
        "read it with pandas and pass the DataFrame"
    )


def _read_errors() -> tuple[type[BaseException], ...]:
    import pyarrow as pa

    return (ValueError, OSError, EOFError, LookupError, TypeError, struct.error,
            pa.ArrowException)


def _guarded(path: Path, fmt: str, read: Callable[[], Iterator[Any]]) -> Iterator[Any]:
    """Run a reader, turning any parser failure into an InputError that names the file."""
    try:
        yield from read()
    except InputError:
        raise
    except _read_errors() as exc:
        raise InputError(
            f"could not read '{path.name}' as {_FORMAT_NAMES[fmt]}: {exc}; check that the file "
            f"is a complete, valid {_FORMAT_NAMES[fmt]} file (re-export it if in doubt)"
        ) from exc


def _parquet_frame(table: Any) -> pd.DataFrame:
    import pandas as pd
    import pyarrow as pa

    # Nullable booleans stay boolean instead of becoming Python objects.
    return table.to_pandas(types_mapper={pa.bool_(): pd.BooleanDtype()}.get)


def _reader(path: Path, fmt: str, columns: list[str] | None, rows: int | None,
            text: Sequence[str] = ()) -> Callable[[], Iterator[pd.DataFrame]]:
    """Factory of a fresh frame iterator over ``path``; ``rows=None`` reads everything at once."""
    import pandas as pd

    def csv() -> Iterator[pd.DataFrame]:
        # Text columns are read as strings in every chunk so levels and labels agree.
        dtype = {name: str for name in text} or None
        if rows is None:
            yield pd.read_csv(path, usecols=columns, dtype=dtype)
            return
        with pd.read_csv(path, usecols=columns, dtype=dtype, chunksize=rows) as reader:
            yield from reader

    def parquet() -> Iterator[pd.DataFrame]:
        import pyarrow.parquet as pq

        # Without pre-buffering pyarrow reads column chunks as the batches need them; with it,
        # memory grows with the file instead of the batch.
        with pq.ParquetFile(path, pre_buffer=False, buffer_size=PARQUET_BUFFER_BYTES) as handle:
            if rows is None:
                yield _parquet_frame(handle.read(columns=columns))
                return
            for batch in handle.iter_batches(batch_size=rows, columns=columns):
                yield _parquet_frame(batch)

    def stata() -> Iterator[pd.DataFrame]:
        if rows is None:
            yield pd.read_stata(path, columns=columns, **_STATA_OPTIONS)
            return
        with pd.read_stata(path, columns=columns, chunksize=rows, **_STATA_OPTIONS) as reader:
            yield from reader

    read = {"csv": csv, "parquet": parquet, "stata": stata}[fmt]
    return lambda: _guarded(path, fmt, read)


def _header(path: Path, fmt: str) -> list[str]:
    """Column names of a file, read without loading its rows."""
    import pandas as pd

    def names() -> Iterator[list[str]]:
        if fmt == "csv":
            yield list(pd.read_csv(path, nrows=0).columns)
        elif fmt == "parquet":
            import pyarrow.parquet as pq

            yield list(pq.read_schema(path).names)
        else:
            with pd.read_stata(path, iterator=True, **_STATA_OPTIONS) as reader:
                yield list(reader.variable_labels())

    try:
        columns = next(_guarded(path, fmt, names), [])
    except InputError as exc:
        if fmt == "csv" and isinstance(exc.__cause__, pd.errors.EmptyDataError):
            raise InputError(f"'{path.name}' is empty (no header and no rows); supply a CSV "
                             "file with a header row and data rows") from exc
        raise
    if not columns:
        raise InputError(f"'{path.name}' has no columns; supply a file with named columns "
                         "and data rows")
    if fmt == "csv":
        _refuse_repeated_names(path)
    return [str(name) for name in columns]


def _refuse_repeated_names(path: Path) -> None:
    """pandas renames a repeated CSV column ('x' twice becomes 'x' and 'x.1') and would use
    the first silently; the raw header row is checked instead."""
    import pandas as pd

    raw = next(_guarded(path, "csv", lambda: iter(
        [pd.read_csv(path, header=None, nrows=1, dtype=str, keep_default_na=False)])))
    names = [str(v) for v in raw.iloc[0].tolist()] if len(raw) else []
    repeated = sorted({n for n in names if names.count(n) > 1})
    if repeated:
        listed = ", ".join(f"{n!r} ({names.count(n)} times)" for n in repeated)
        raise InputError(f"the header of '{path.name}' repeats column name(s) {listed}; "
                         "rename the duplicates so that each column name is unique")


def read_table(path: str | os.PathLike[str]) -> pd.DataFrame:
    """Read a whole .csv / .csv.gz / .parquet / .pq / .dta file into a DataFrame.

    Stata value labels and date formats are not applied (the stored numbers are returned), so
    that ``from_frame(read_table(p), spec)`` and ``from_file(p, spec)`` give the same values.

    Raises
    ------
    InputError
        Missing file, directory, unsupported suffix, unreadable or empty file.
    """
    resolved, fmt = _file(path)
    _header(resolved, fmt)
    frame = next(_reader(resolved, fmt, None, None)())
    if len(frame) == 0:
        raise InputError(f"'{resolved.name}' has columns but no data rows; supply a file with "
                         "at least one row")
    return frame


def from_file(path: str | os.PathLike[str], spec: Spec, *,
              chunk_rows: int = DEFAULT_CHUNK_ROWS) -> Source:
    """Streaming source over a file; memory grows with ``chunk_rows``, not with the file.

    ``path`` may also be a directory or glob of Parquet / CSV files (hive partitions give
    columns) or ``file.duckdb::table`` (see :mod:`sensiv.data.datasets`).

    Only the used columns are read.  Column names, numeric roles and text controls are
    checked from the first rows now; values of later rows are checked as their chunk is
    reached, so iterating :meth:`Source.chunks` may raise InputError part-way.  When there are
    text controls, one extra pass over the used columns fixes their levels.

    Raises
    ------
    InputError
        Any problem with the path, the file or its columns.
    """
    rows = _check_chunk_rows(chunk_rows)
    if is_dataset(path):
        return from_dataset(path, spec, chunk_rows=rows)
    resolved, fmt = _file(path)
    available = _header(resolved, fmt)
    used = read_columns(spec) if isinstance(spec, Spec) else []

    def samples() -> list[pd.DataFrame]:
        first = next(_reader(resolved, fmt, used, TYPE_SAMPLE_ROWS)(), None)
        if first is None or len(first) == 0:
            raise InputError(f"'{resolved.name}' has columns but no data rows; supply a file "
                             "with at least one row")
        return [first]

    def make_frames(text: list[str]) -> Callable[[], Iterator[pd.DataFrame]]:
        labels = [*text, *cluster_columns(spec)]
        return _reader(resolved, fmt, used, rows, labels)

    columns = _parquet_columns(resolved, spec, rows) if fmt == "parquet" else None
    source = build_source(spec, resolved.name, available, samples, make_frames, eager=False,
                          chunk_rows=rows, columns=columns, ahead=columns is not None)
    origin = (Origin(fmt, (str(resolved),), location=str(resolved))
              if fmt in ("csv", "parquet") else None)
    return dataclasses.replace(source, origin=origin, chunk_rows=rows)


def _parquet_columns(path: Path, spec: Any, rows: int
                     ) -> Callable[[], Iterator[list[np.ndarray]]] | None:
    """The fast path's chunks of a Parquet file whose used columns are Arrow numbers: each
    record batch's columns as numpy arrays (no pandas), or ``None`` for the general path."""
    import pyarrow.parquet as pq

    names = arrow_fast_columns(spec, pq.read_schema(path)) if isinstance(spec, Spec) else None
    if names is None:
        return None

    def batches() -> Iterator[list[np.ndarray]]:
        with pq.ParquetFile(path, pre_buffer=False, buffer_size=PARQUET_BUFFER_BYTES) as handle:
            for batch in handle.iter_batches(batch_size=rows, columns=names, use_threads=True):
                yield batch_arrays(batch, names)
    return lambda: _guarded(path, "parquet", batches)


def load(path_or_frame: Any, spec: Spec, *, chunk_rows: int | None = None) -> Source:
    """A DataFrame goes to :func:`from_frame`, a ``dask.dataframe.DataFrame`` to
    :func:`~sensiv.data.datasets.from_dask` (read by the ``dask`` engine), anything else is a
    path for :func:`from_file`."""
    import pandas as pd

    if isinstance(path_or_frame, pd.DataFrame):
        return from_frame(path_or_frame, spec, chunk_rows=chunk_rows)
    if is_dask_frame(path_or_frame):
        return from_dask(path_or_frame, spec)
    return from_file(path_or_frame, spec,
                     chunk_rows=DEFAULT_CHUNK_ROWS if chunk_rows is None else chunk_rows)
