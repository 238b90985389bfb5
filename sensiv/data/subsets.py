"""A subgroup of a data set, read where its rows live: the same data under another
specification (a narrower row filter, fewer controls) on the same engine, and the counts of a
0/1 column that marks the subgroup.

A subgroup is a row filter, so every engine selects it the way it selects ``--where`` rows
(DuckDB as a ``WHERE`` clause, Dask per partition); nothing is gathered into this process.
The counts of the marker are one kernel over pandas columns, added over partitions
(:class:`IndicatorCounts`); the DuckDB engine forms the same counts in SQL.

Examples
--------
>>> import pandas as pd
>>> counts = count_indicator(pd.Series([1, 0, None, 1, 3.5]))
>>> counts.rows, counts.missing, counts.ones, counts.others, counts.least_other
(5, 1, 2, 1, 3.5)
>>> (counts + counts).ones
4
>>> frame = pd.DataFrame({"m": [1, 1, 0, None], "age": [20, 40, 50, 60]})
>>> from sensiv.data.where import parse_filter
>>> count_kept(frame, "m", (parse_filter("age > 30"), {"age": "numeric"})).ones
1
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from sensiv.core.errors import InputError
from sensiv.data.convert import dtype_kind
from sensiv.data.datasets import from_dask, with_engine
from sensiv.data.readers import from_file, from_frame
from sensiv.data.source import Source
from sensiv.data.spec import Spec
from sensiv.data.where import column_term, filter_columns, keep_mask

if TYPE_CHECKING:
    import pandas as pd


@dataclass(frozen=True, slots=True)
class IndicatorCounts:
    """Rows of a column that should hold only 0 and 1: all rows, missing ones, ones, values
    other than 0 and 1 and the least of them; for a text column ``text`` and its least
    value.  Counts of two partitions add."""

    rows: int = 0
    missing: int = 0
    ones: int = 0
    others: int = 0
    least_other: float | None = None
    text: bool = False
    least_text: str | None = None

    def __add__(self, other: IndicatorCounts) -> IndicatorCounts:
        def least(a, b):
            return b if a is None else a if b is None else min(a, b)

        return IndicatorCounts(self.rows + other.rows, self.missing + other.missing,
                               self.ones + other.ones, self.others + other.others,
                               least(self.least_other, other.least_other),
                               self.text or other.text, least(self.least_text, other.least_text))


def count_indicator(series: pd.Series) -> IndicatorCounts:
    """:class:`IndicatorCounts` of one pandas column (a frame, or one partition of it)."""
    missing = series.isna().to_numpy()
    present = series[~missing]
    if dtype_kind(series.dtype) != "numeric":
        texts = present.astype(str)
        return IndicatorCounts(len(series), int(missing.sum()), 0, len(present), None, True,
                               min(texts) if len(texts) else None)
    values = present.to_numpy(dtype=float)
    other = values[(values != 0.0) & (values != 1.0)]
    return IndicatorCounts(len(series), int(missing.sum()), int((values == 1.0).sum()),
                           int(other.size), float(other.min()) if other.size else None)


def count_kept(frame: pd.DataFrame, column: str, row_filter=None) -> IndicatorCounts:
    """:func:`count_indicator` of ``column`` among the rows of ``frame`` that ``row_filter``
    (a source's parsed filter and its columns' kinds, or ``None``) keeps."""
    if row_filter is not None:
        frame = frame[keep_mask(row_filter[0], frame, row_filter[1])]
    return count_indicator(frame[column])


def count_frames(frames, column: str, row_filter=None) -> IndicatorCounts:
    """:func:`count_kept` summed over the frames of one factory (a file, a table)."""
    return sum((count_kept(frame, column, row_filter) for frame in frames()), IndicatorCounts())


def counted_columns(column: str, row_filter=None) -> list[str]:
    """The columns :func:`count_kept` reads: the marker and the row filter's."""
    return list(dict.fromkeys([column, *(filter_columns(row_filter[0]) if row_filter else [])]))


def marked(spec: Spec, column: str, drop: tuple[str, ...] = ()) -> Spec:
    """``spec`` restricted to the rows with ``column == 1`` (and its row filter), without the
    controls ``drop``."""
    test = f"{column_term(column)} == 1"
    where = test if spec.where is None else f"({spec.where}) and {test}"
    controls = tuple(c for c in spec.controls if c not in drop)
    return dataclasses.replace(spec, where=where, controls=controls)


def reread(data: Any, spec: Spec) -> Source:
    """The rows of ``data`` (a DataFrame, or a source read from files, a DuckDB table or a
    Dask DataFrame) under ``spec``, on the engine ``data`` is read by.

    Raises
    ------
    InputError
        ``data`` is a source whose rows cannot be read again (an in-memory one), or any
        problem with the columns under ``spec``.
    """
    origin = getattr(data, "origin", None)
    if not hasattr(data, "chunks"):
        return from_frame(data, spec)
    if origin is None:
        raise InputError(f"a subgroup of {data.description} is read from its rows, which this "
                         "source does not keep; pass the DataFrame or the path instead of a "
                         "prepared source")
    if origin.kind == "dask":
        source = from_dask(origin.frame, spec)
    else:
        rows = {"chunk_rows": data.chunk_rows} if data.chunk_rows is not None else {}
        source = from_file(origin.location, spec, **rows)
    return with_engine(source, data.engine, data.scheduler)
