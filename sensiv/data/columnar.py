"""The fast path from plain numeric columns to clean float64 blocks, without pandas.

When every used column is a plain numeric column (integers, floats or booleans: no text
control, no text cluster or absorbed fixed effect, no categorical control, no row filter; a
cluster or fixed-effect column of numbers is a column of labels), a reader hands over, per chunk,
one 1-D array per used column — slices of a frame's numpy columns, or the columns of an Arrow
record batch — and :func:`clean_arrays` checks and copies them straight into the column-major
block of a :class:`~sensiv.data.source.Chunk`.  The checks and messages are those of the
general path (:mod:`sensiv.data.source`), in the same order, so both give the same chunks and
raise the same errors; a column passes the whole check with one dot product when its sum of
squares proves that no value is missing, infinite or out of range
(:func:`plainly_finite`), and only a column that fails that test is examined value by value.

:func:`cleaned` runs the reading and cleaning of the next chunk on a worker thread while the
caller works on the current one (Parquet decoding and numpy's copies release the GIL), so a
streamed pass uses two cores.
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Any

import numpy as np

from sensiv.core.errors import InputError
from sensiv.core.limits import MAX_MAGNITUDE
from sensiv.data.convert import check_scale, data_row, extremes
from sensiv.data.spec import Spec, cluster_columns, read_columns, roles, used_columns

_UPPER = 0.25 * MAX_MAGNITUDE ** 2
_LOWER = 4.0 / MAX_MAGNITUDE ** 2
# Margins of 4 on both sides cover the rounding of the sum of squares.
DOT_ROWS = 8192
"""Values per dot product in :func:`plainly_finite`: OpenBLAS runs a longer one on several
threads, which on a busy machine costs far more than the sum itself (measured: 80×)."""


@dataclass(frozen=True, slots=True)
class Cleaned:
    """One chunk's clean rows: ``values`` (column-major float64, finite), the weights (or
    ``None``), the chunk's rows before listwise deletion, the rows kept and the missing
    values per column."""

    values: np.ndarray
    weights: np.ndarray | None
    rows: int
    kept: int
    missing: dict[str, int]
    clusters: np.ndarray | None = None  # as Chunk.clusters: (rows,) or (rows, 2) labels
    groups: tuple[np.ndarray, ...] | None = None  # as Chunk.groups: one per absorbed effect


def fast_columns(spec: Spec, kinds: dict[str, str]) -> list[str] | None:
    """The columns the fast path reads (:func:`sensiv.data.spec.used_columns`), or ``None``
    when ``spec`` needs the general path (a row filter, categorical controls) or a column's
    kind (``kinds[name]``) is not ``"plain"`` (text clusters and fixed effects among them)."""
    if spec.where is not None or spec.categorical:
        return None
    names = used_columns(spec)
    return names if all(kinds.get(name) == "plain" for name in names) else None


def arrow_fast_columns(spec: Any, schema: Any) -> list[str] | None:
    """:func:`fast_columns` of an Arrow ``schema`` (a Parquet file's or data set's): the
    columns its batches hand to the fast path, or ``None`` for the general path."""
    if not isinstance(spec, Spec):
        return None
    kinds = {name: arrow_kind(schema.field(name).type) for name in read_columns(spec)
             if schema.get_field_index(name) >= 0}
    return fast_columns(spec, kinds)


def batch_arrays(batch: Any, names: Sequence[str]) -> list[np.ndarray]:
    """The ``names`` columns of an Arrow record batch as numpy arrays (:func:`arrow_array`)."""
    return [arrow_array(batch.column(name)) for name in names]


def plainly_finite(column: np.ndarray) -> bool:
    """Whether ``column`` (float64) certainly holds no NaN or infinite value and no magnitude
    that :func:`sensiv.data.convert.check_scale` refuses: its sum of squares ``s`` is finite,
    ``s ≤ MAX²/4`` (so every ``|x| ≤ MAX``) and ``s ≥ 4 n / MAX²`` (so the largest ``|x|``,
    at least ``√(s/n)``, is not below ``1/MAX``).  ``False`` says only "look closer"."""
    s = 0.0
    with np.errstate(all="ignore"):  # an overflow or a NaN is the answer "look closer"
        for start in range(0, column.size, DOT_ROWS):
            piece = column[start:start + DOT_ROWS]
            s += float(np.dot(piece, piece))
    return _LOWER * column.size <= s <= _UPPER


def checked_column(column: np.ndarray, role: str, name: str, where: str, first_row: int
                   ) -> np.ndarray | None:
    """The checks of one float64 column (infinite values, scale); its missing mask (``None``:
    none).  Finite values below ``MAX_MAGNITUDE`` cannot sum to NaN, so a NaN sum means a
    missing value, and only then is the mask formed."""
    found = extremes(column)
    if math.isinf(found[0]) or math.isinf(found[1]):
        infinite = np.isinf(column)
        raise InputError(
            f"{role} {name!r} in {where} has {int(infinite.sum())} infinite value(s) "
            f"(first at data row {data_row(first_row, int(np.argmax(infinite)))}); "
            "recode them to finite numbers or drop those rows"
        )
    check_scale(column, f"{role} {name!r} in {where}", first_row, found)
    if not math.isnan(float(np.add.reduce(column))):
        return None
    return np.isnan(column)


def check_weights(spec: Spec, weights: np.ndarray, where: str, first_row: int) -> None:
    bad = weights <= 0  # NaN compares False and is handled as missing
    if bad.any():
        position = int(np.argmax(bad))
        raise InputError(
            f"weight {spec.weight!r} in {where} has {int(bad.sum())} zero or negative "
            f"value(s) (e.g. {weights[position]:g} at data row "
            f"{data_row(first_row, position)}); weights must be positive: drop those rows "
            "or fix the weights"
        )


def clean_arrays(arrays: Sequence[np.ndarray], spec: Spec, where: str, first_row: int
                 ) -> Cleaned:
    """Check the used columns of one chunk (``arrays`` in the order of
    :func:`~sensiv.data.spec.used_columns`, any real dtype, NaN for missing) and copy them
    into a column-major float64 block, rows with a missing value dropped.  ``first_row``:
    the data rows before this chunk (for messages)."""
    names = used_columns(spec)
    labels = set(label_columns(spec))
    columns = {name: (a if a.dtype == np.float64 or name in labels else a.astype(np.float64))
               for name, a in zip(names, arrays)}
    n = len(arrays[0]) if arrays else 0
    missing: dict[str, int] = {}
    drop = None
    for role, name in roles(spec):
        column = columns[name]
        if name in labels:          # labels: only missing (NaN where Arrow had a null)
            mask = np.isnan(column) if column.dtype.kind == "f" else None
            mask = None if mask is None or not mask.any() else mask
        else:
            mask = None if plainly_finite(column) else checked_column(column, role, name,
                                                                      where, first_row)
        missing[name] = 0 if mask is None else int(mask.sum())
        if mask is not None:
            drop = mask if drop is None else drop | mask
    if spec.weight is not None:
        check_weights(spec, columns[spec.weight], where, first_row)
    keep = None if drop is None or not drop.any() else ~drop
    kept = n if keep is None else int(keep.sum())
    model = (spec.outcome, *spec.treatments, *spec.instruments, *spec.controls)
    values = np.empty((kept, len(model)), dtype=np.float64, order="F")
    for j, name in enumerate(model):
        values[:, j] = columns[name] if keep is None else columns[name][keep]
    weights = None
    if spec.weight is not None:
        w = columns[spec.weight]
        weights = np.array(w if keep is None else w[keep], dtype=np.float64)

    def kept_labels(name: str) -> np.ndarray:
        return columns[name] if keep is None else columns[name][keep]

    names = cluster_columns(spec)
    clusters = (None if not names else kept_labels(names[0]) if len(names) == 1
                else np.column_stack([kept_labels(name) for name in names]))
    groups = tuple(kept_labels(name) for name in spec.absorb) if spec.absorb else None
    return Cleaned(values, weights, n, kept, missing, clusters, groups)


def label_columns(spec: Spec) -> list[str]:
    """The columns read as labels, not numbers: the cluster and absorbed fixed-effect columns."""
    return list(dict.fromkeys([*cluster_columns(spec), *spec.absorb]))


def cleaned(batches: Iterator[Sequence[np.ndarray]], spec: Spec, where: str, *,
            ahead: bool) -> Iterator[Cleaned]:
    """:func:`clean_arrays` of every batch; with ``ahead`` the next batch is read and cleaned
    on a worker thread while the caller uses the current one.  An error in a batch is raised
    when that batch is reached, as without ``ahead``."""
    if not ahead:
        rows = 0
        for arrays in batches:
            item = clean_arrays(arrays, spec, where, rows)
            rows += item.rows
            yield item
        return

    def step(first_row: int) -> Cleaned | None:
        arrays = next(batches, None)
        return None if arrays is None else clean_arrays(arrays, spec, where, first_row)

    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="sensiv-read") as pool:
        future = pool.submit(step, 0)
        rows = 0
        while (item := future.result()) is not None:
            rows += item.rows
            future = pool.submit(step, rows)
            yield item


# --------------------------------------------------------------------------- column kinds
def numpy_kind(dtype: Any) -> str:
    """``"plain"`` for a numpy integer, float or boolean dtype (read by the fast path),
    ``"general"`` for anything else (pandas extension dtypes, objects, text, dates)."""
    return "plain" if isinstance(dtype, np.dtype) and dtype.kind in "biuf" else "general"


def arrow_kind(arrow_type: Any) -> str:
    """``"plain"`` for an Arrow integer, float or boolean type, ``"general"`` otherwise
    (dictionary-encoded, text, decimal, dates: pandas decides those)."""
    import pyarrow as pa

    plain = (pa.types.is_integer(arrow_type) or pa.types.is_floating(arrow_type)
             or pa.types.is_boolean(arrow_type))
    return "plain" if plain else "general"


def arrow_array(column: Any) -> np.ndarray:
    """An Arrow integer / float / boolean column as a numpy array, nulls as NaN — the values
    pandas gives for it (a view of the buffer where Arrow allows one)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    if isinstance(column, pa.ChunkedArray):
        column = column.combine_chunks()
    if column.null_count == 0:
        return column.to_numpy(zero_copy_only=False)
    if pa.types.is_boolean(column.type):
        column = pc.cast(column, pa.float64())
    return column.to_numpy(zero_copy_only=False)  # nulls become NaN (as float64)
