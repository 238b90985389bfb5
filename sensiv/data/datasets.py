"""Data sets beyond one file: a directory or glob of Parquet or CSV files (hive-partitioned
layouts such as ``data/year=2019/part-0.parquet`` included), read with ``pyarrow.dataset``, and a
table of a DuckDB database file (``path/file.duckdb::table``).

Each becomes the same validated :class:`~sensiv.data.source.Source` as a single file; its
:class:`Origin` tells the engines (``numpy``, ``duckdb``, ``dask``) where the raw rows live.
Partition columns (``year`` above) are columns like any other: controls, clusters and
``--where``.  A file that cannot be read stops the analysis with a message naming the file.

Examples
--------
>>> is_dataset("data/*.parquet"), is_dataset("study.duckdb::visits")
(True, True)
>>> is_dataset("one.csv")
False
"""

from __future__ import annotations

import dataclasses
import glob
import os
import struct
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from sensiv.core.errors import InputError
from sensiv.data.source import Source, build_source
from sensiv.data.spec import Spec, read_columns

if TYPE_CHECKING:
    import pandas as pd

ENGINES = ("numpy", "duckdb", "dask")
"""The engines that run the two passes over the rows (``numpy`` streams chunks in-process)."""

EXTRAS = {"duckdb": "duckdb", "dask": "dask"}
"""The optional extra of each engine that needs one (``pip install "sensiv[EXTRA]"``)."""

_SUFFIXES = {".parquet": "parquet", ".pq": "parquet", ".csv": "csv"}
_SAMPLE_ROWS = 100_000


@dataclass(frozen=True, slots=True)
class Origin:
    """Where the raw rows of a source live, for engines that read them themselves.

    ``kind`` is ``"parquet"``, ``"csv"`` or ``"duckdb"``; ``paths`` the data files (for
    ``duckdb``: the database file); ``table`` the table of a DuckDB database; ``hive`` whether
    ``column=value`` directories (below ``base``) add partition columns.
    """

    kind: str
    paths: tuple[str, ...]
    table: str | None = None
    hive: bool = False
    base: str | None = None
    frame: Any = None
    """The ``dask.dataframe.DataFrame`` of a source built by :func:`from_dask`."""
    location: str | None = None
    """DATA as given (a file, a directory or glob, ``file.duckdb::table``), to read it again."""


def is_dataset(path: Any) -> bool:
    """True for a directory, a glob pattern or ``file.duckdb::table``."""
    text = os.fspath(path) if isinstance(path, (str, os.PathLike)) else ""
    return bool(text) and ("::" in text or any(c in text for c in "*?[")
                           or os.path.isdir(text))


def missing_extra(engine: str) -> InputError:
    """The message for an engine whose optional dependency is not installed."""
    return InputError(f"--engine {engine} needs the optional dependency {EXTRAS[engine]!r}, "
                      f"which is not installed; install it with: pip install "
                      f"\"sensiv[{EXTRAS[engine]}]\" (or choose --engine numpy)")


def check_engine(engine: str, scheduler: str | None) -> None:
    """Refuse an unknown engine, or a scheduler without the dask engine."""
    if engine not in ENGINES:
        raise InputError(f"--engine {engine!r} is not an engine; choose one of "
                         f"{', '.join(ENGINES)}")
    if scheduler is not None and engine != "dask":
        raise InputError(f"--scheduler {scheduler!r} is for --engine dask; add --engine dask "
                         "or drop --scheduler")


def with_engine(source: Source, engine: str = "numpy", scheduler: str | None = None) -> Source:
    """``source`` read by ``engine``; InputError for an unknown engine or an unusable pairing."""
    check_engine(engine, scheduler)
    if engine == "duckdb" and (source.origin is None or source.origin.kind == "dask"):
        raise InputError(f"--engine duckdb reads CSV and Parquet files, directories or globs "
                         f"of them and DuckDB tables; {source.description} is none of these: "
                         "convert it to Parquet or choose --engine numpy")
    return dataclasses.replace(source, engine=engine, scheduler=scheduler)


# --------------------------------------------------------------------------- files
def _files(text: str) -> tuple[list[str], str | None]:
    """The data files of a directory or glob and the base directory of their partitions."""
    if os.path.isdir(text):
        found = [str(p) for p in sorted(Path(text).rglob("*"))
                 if p.is_file() and not p.name.startswith((".", "_"))]
        return found, text
    found = sorted(p for p in glob.glob(text, recursive=True) if os.path.isfile(p))
    base = text.split("*")[0].split("?")[0].split("[")[0]
    base = base if base.endswith(os.sep) else os.path.dirname(base)
    return found, (base or None)


def _format(files: list[str], text: str) -> str:
    if not files:
        raise InputError(f"no data files in '{text}'; give a directory or a glob (e.g. "
                         "'data/*.parquet') that matches Parquet or CSV files")
    kinds = {_SUFFIXES.get(Path(f).suffix.lower()) for f in files}
    if None in kinds or len(kinds) > 1:
        odd = next(f for f in files if _SUFFIXES.get(Path(f).suffix.lower()) != min(
            kinds - {None}, default=None))
        raise InputError(f"'{text}' holds files of several or unknown types (e.g. "
                         f"'{Path(odd).name}'); a data set is all .parquet / .pq or all .csv "
                         "files: move the others away or narrow the glob")
    return kinds.pop()


def _read_errors() -> tuple[type[BaseException], ...]:
    import pyarrow as pa

    return (ValueError, OSError, EOFError, LookupError, TypeError, struct.error,
            pa.ArrowException)


def _corrupt(name: str, what: str, exc: BaseException) -> InputError:
    return InputError(f"could not read '{name}' as {what}: {exc}; check that the file is a "
                      f"complete, valid {what} file (re-export it, or move it out of the data "
                      "set)")


def _frame(batch: Any) -> pd.DataFrame:
    import pandas as pd
    import pyarrow as pa

    return batch.to_pandas(types_mapper={pa.bool_(): pd.BooleanDtype()}.get)


def _arrow_dataset(files: list[str], fmt: str, base: str | None) -> Any:
    import pyarrow.dataset as ds

    hive = ds.HivePartitioning.discover(infer_dictionary=False)
    try:
        return ds.dataset(files, format=fmt, partitioning=hive, partition_base_dir=base)
    except _read_errors() as exc:
        raise InputError(f"could not open the data set of {len(files)} {fmt} file(s) in "
                         f"'{base}': {exc}; check that every file is a valid {fmt} file with "
                         "the same columns") from exc


def _fragment_frames(dataset: Any, columns: list[str] | None, rows: int, first_only: bool = False
                     ) -> Iterator[pd.DataFrame]:
    what = "Parquet" if "Parquet" in type(dataset.format).__name__ else "CSV"
    for fragment in dataset.get_fragments():
        try:
            for batch in fragment.to_batches(schema=dataset.schema, columns=columns,
                                             batch_size=rows):
                yield _frame(batch)
                if first_only:
                    return
        except InputError:
            raise
        except _read_errors() as exc:
            raise _corrupt(Path(fragment.path).name, what, exc) from exc


def partition_frames(source: Source) -> list[Callable[[], Iterator[pd.DataFrame]]]:
    """One factory of frame iterators per partition (file) of a file-based source, reading
    the used columns; the engines that spread the work hand one partition to each task."""
    origin = source.origin
    if origin is None or origin.kind in ("duckdb", "dask"):
        return [source.frames]
    used = read_columns(source.spec)
    return [_dataset_reader([path], origin.kind, origin.base, used, source.chunk_rows)
            for path in origin.paths]


def column_frames(origin: Origin, columns: list[str], rows: int
                  ) -> list[Callable[[], Iterator[pd.DataFrame]]]:
    """One factory of frame iterators over ``columns`` per partition of ``origin`` (a file, a
    DuckDB table, a partition of a Dask DataFrame), whatever the columns a source uses."""
    if origin.kind == "duckdb":
        return [_table_reader(Path(origin.paths[0]), origin.table, columns, rows)]
    if origin.kind == "dask":
        part = origin.frame[columns]
        return [lambda k=k: iter([part.get_partition(k).compute()])
                for k in range(part.npartitions)]
    return [_dataset_reader([path], origin.kind, origin.base, columns, rows)
            for path in origin.paths]


def origin_columns(origin: Origin) -> list[str]:
    """The column names of the data set at ``origin``."""
    if origin.kind == "duckdb":
        return _table_columns(Path(origin.paths[0]), origin.table)
    if origin.kind == "dask":
        return [str(c) for c in origin.frame.columns]
    return list(_arrow_dataset(list(origin.paths), origin.kind, origin.base).schema.names)


def _dataset_columns(files: list[str], base: str | None, schema: Any, spec: Any, rows: int
                     ) -> Callable[[], Iterator[list]] | None:
    """The fast path's chunks of a Parquet data set whose used columns are Arrow numbers
    (:mod:`sensiv.data.columnar`): each record batch's columns as numpy arrays, file by file,
    or ``None`` for the general path."""
    from sensiv.data.columnar import arrow_fast_columns, batch_arrays

    names = arrow_fast_columns(spec, schema)
    if names is None:
        return None

    def batches() -> Iterator[list]:
        dataset = _arrow_dataset(files, "parquet", base)
        for fragment in dataset.get_fragments():
            try:
                for batch in fragment.to_batches(schema=dataset.schema, columns=names,
                                                 batch_size=rows):
                    yield batch_arrays(batch, names)
            except _read_errors() as exc:
                raise _corrupt(Path(fragment.path).name, "Parquet", exc) from exc
    return batches


def _dataset_reader(files: list[str], fmt: str, base: str | None, used: list[str], rows: int
                    ) -> Callable[[], Iterator[pd.DataFrame]]:
    def frames() -> Iterator[pd.DataFrame]:
        dataset = _arrow_dataset(files, fmt, base)
        yield from _fragment_frames(dataset, used, rows)
    return frames


# --------------------------------------------------------------------------- DuckDB tables
def _duckdb_table(text: str) -> tuple[Path, str]:
    path, _, table = text.partition("::")
    if not table.strip():
        raise InputError(f"'{text}' names no table; write DATA as path/file.duckdb::table")
    resolved = Path(path)
    if not resolved.is_file():
        raise InputError(f"DuckDB database '{resolved}' does not exist; check the path "
                         f"(relative paths start at {Path.cwd()})")
    return resolved, table


def _connect(path: Path) -> Any:
    try:
        import duckdb
    except ImportError as exc:
        raise InputError("reading a DuckDB table needs the optional dependency 'duckdb'; "
                         "install it with: pip install \"sensiv[duckdb]\"") from exc
    try:
        return duckdb.connect(str(path), read_only=True)
    except duckdb.Error as exc:
        raise InputError(f"could not open '{path.name}' as a DuckDB database: {exc}; check "
                         "that it is a DuckDB database file") from exc


def quoted(name: str) -> str:
    """An SQL identifier in double quotes (inner quotes doubled), never user SQL."""
    return '"' + name.replace('"', '""') + '"'


def _table_reader(path: Path, table: str, used: list[str] | None, rows: int
                  ) -> Callable[[], Iterator[pd.DataFrame]]:
    def frames() -> Iterator[pd.DataFrame]:
        import duckdb

        connection = _connect(path)
        try:
            listed = ", ".join(quoted(c) for c in used) if used else "*"
            try:
                result = connection.execute(f"SELECT {listed} FROM {quoted(table)}")
                batches = getattr(result, "fetch_record_batch", None) or result.to_arrow_reader
                reader = batches(rows)
            except duckdb.Error as exc:
                raise InputError(f"could not read table {table!r} of '{path.name}': {exc}; "
                                 "check the table name") from exc
            for batch in reader:
                yield _frame(batch)
        finally:
            connection.close()
    return frames


def _table_columns(path: Path, table: str) -> list[str]:
    import duckdb

    connection = _connect(path)
    try:
        return [row[0] for row in connection.execute(f"DESCRIBE {quoted(table)}").fetchall()]
    except duckdb.Error as exc:
        raise InputError(f"'{path.name}' has no table {table!r} ({exc}); check the name after "
                         "'::'") from exc
    finally:
        connection.close()


# --------------------------------------------------------------------------- Dask frames
def is_dask_frame(data: Any) -> bool:
    """True for a ``dask.dataframe.DataFrame`` (checked without importing dask)."""
    return type(data).__module__.startswith("dask") and hasattr(data, "npartitions")


def from_dask(frame: Any, spec: Spec) -> Source:
    """A source over a ``dask.dataframe.DataFrame``, read by the ``dask`` engine: each
    partition is cleaned and reduced on the cluster (the leading rows decide the column kinds
    here; text controls' levels take one pass)."""
    used = read_columns(spec) if isinstance(spec, Spec) else []

    def make_frames(labels: list[str]) -> Callable[[], Iterator[pd.DataFrame]]:
        def frames() -> Iterator[pd.DataFrame]:
            for k in range(frame.npartitions):
                yield frame.get_partition(k)[used].compute()
        return frames

    def samples() -> list[pd.DataFrame]:
        head = frame.head(_SAMPLE_ROWS, npartitions=-1)
        if len(head) == 0:
            raise InputError("the Dask DataFrame has columns but no rows; supply data with at "
                             "least one row")
        return [head]

    source = build_source(spec, "Dask DataFrame", list(frame.columns), samples, make_frames,
                          eager=False)
    return dataclasses.replace(source, origin=Origin("dask", (), frame=frame), engine="dask")


# --------------------------------------------------------------------------- the source
def from_dataset(path: Any, spec: Spec, *, chunk_rows: int) -> Source:
    """Streaming source over a directory, a glob or a DuckDB table (see the module text).

    Raises
    ------
    InputError
        No matching files, mixed file types, a file that cannot be read, or any problem with
        the columns (as for a single file).
    """
    text = os.fspath(path)
    used = read_columns(spec) if isinstance(spec, Spec) else []
    if "::" in text:
        database, table = _duckdb_table(text)
        available = _table_columns(database, table)
        origin = Origin("duckdb", (str(database),), table, location=text)
        description = f"'{database.name}::{table}'"

        def make_frames(labels: list[str]) -> Callable[[], Iterator[pd.DataFrame]]:
            return _table_reader(database, table, used, chunk_rows)
        first = _table_reader(database, table, used, _SAMPLE_ROWS)
    else:
        files, base = _files(text)
        fmt = _format(files, text)
        dataset = _arrow_dataset(files, fmt, base)
        available = list(dataset.schema.names)
        hive = any("=" in part for f in files
                   for part in Path(os.path.relpath(f, base or ".")).parts)
        origin = Origin(fmt, tuple(files), None, hive, base, location=text)
        description = f"'{text}' ({len(files)} file{'s' if len(files) > 1 else ''})"

        def make_frames(labels: list[str]) -> Callable[[], Iterator[pd.DataFrame]]:
            return _dataset_reader(files, fmt, base, used, chunk_rows)

        def first() -> Iterator[pd.DataFrame]:
            return _fragment_frames(_arrow_dataset(files, fmt, base), used, _SAMPLE_ROWS, True)

    def samples() -> list[pd.DataFrame]:
        frame = next(iter(first()), None)
        if frame is None or len(frame) == 0:
            raise InputError(f"{description} has columns but no data rows; supply a data set "
                             "with at least one row")
        return [frame]

    columns = (_dataset_columns(files, base, dataset.schema, spec, chunk_rows)
               if "::" not in text and fmt == "parquet" else None)
    source = build_source(spec, description, available, samples, make_frames, eager=False,
                          columns=columns, ahead=columns is not None)
    return dataclasses.replace(source, origin=origin, chunk_rows=chunk_rows)
