"""Reading data, validating column roles and yielding clean numeric chunks.

This is the boundary layer: everything below it receives finite ``float64`` arrays and never
checks its inputs again.  A :class:`Spec` names the columns and their roles; a :class:`Source`
turns a CSV / Parquet / Stata file or a pandas frame into a restartable stream of
:class:`Chunk` objects whose columns follow :attr:`Layout.columns`.

Missing values are handled listwise: a row with a missing value in any used column is dropped
and counted.  Text controls are expanded to 0/1 indicator columns with the first level (in
``str`` order) dropped; the levels are fixed once for the whole data set so that every chunk
has the same columns.  In text columns an empty string counts as missing, as it does in Stata.

Examples
--------
>>> import pandas as pd
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
import difflib
import os
import struct
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from sensiv.core.errors import InputError

if TYPE_CHECKING:
    import pandas as pd

DEFAULT_CHUNK_ROWS = 100_000
"""Rows per chunk when streaming from a file."""

TYPE_SAMPLE_ROWS = 100_000
"""Leading rows read from a file to decide which controls are text before streaming."""

PARQUET_BUFFER_BYTES = 1 << 20
"""Read buffer for streaming Parquet column chunks."""

MAX_LISTED_COLUMNS = 25
"""Available columns listed in an unknown-column message before the list is cut."""

MAX_SUGGESTIONS = 3
SUGGESTION_CUTOFF = 0.6  # difflib similarity below which a name is not suggested

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


# --------------------------------------------------------------------------- specification
def _names(value: Any, role: str) -> tuple[str, ...]:
    if isinstance(value, str):
        value = (value,)
    try:
        names = tuple(value)
    except TypeError as exc:
        raise InputError(
            f"{role} columns must be a list of names; got {value!r}: pass e.g. ['{role}_a']"
        ) from exc
    for name in names:
        _check_name(name, role)
    return names


def _check_name(name: Any, role: str) -> None:
    if not isinstance(name, str) or not name:
        raise InputError(f"{role} column name must be a non-empty string; got {name!r}")


@dataclass(frozen=True, slots=True)
class Spec:
    """Column roles of an IV model.

    Parameters
    ----------
    outcome : str
        Outcome column ``y``.
    treatments : sequence of str
        Endogenous treatment columns ``X`` (at least one).
    instruments : sequence of str
        Excluded instruments ``Z`` (at least as many as treatments).
    controls : sequence of str, default ()
        Exogenous controls ``W``; text columns become indicator columns.
    cluster : str or None
        Column of cluster labels for cluster-robust inference.
    weight : str or None
        Column of positive analytic weights.
    constant : bool, default True
        Whether the model has an intercept (added analytically, never as a column).

    Raises
    ------
    InputError
        No treatment or instrument, fewer instruments than treatments, or a column named
        more than once.
    """

    outcome: str
    treatments: tuple[str, ...]
    instruments: tuple[str, ...]
    controls: tuple[str, ...] = ()
    cluster: str | None = None
    weight: str | None = None
    constant: bool = True

    def __post_init__(self) -> None:
        _check_name(self.outcome, "outcome")
        for role in ("treatments", "instruments", "controls"):
            object.__setattr__(self, role, _names(getattr(self, role), role[:-1]))
        for role in ("cluster", "weight"):
            if getattr(self, role) is not None:
                _check_name(getattr(self, role), role)
        if not isinstance(self.constant, (bool, np.bool_)):
            raise InputError(f"constant must be True or False; got {self.constant!r}")
        object.__setattr__(self, "constant", bool(self.constant))
        if not self.treatments:
            raise InputError("no treatment given: name at least one treatment column")
        if not self.instruments:
            raise InputError("no instrument given: name at least one instrument column")
        k_x, k_z = len(self.treatments), len(self.instruments)
        if k_z < k_x:
            raise InputError(
                f"{k_x} treatments need at least {k_x} instruments; got {k_z}: "
                "add an instrument or drop a treatment"
            )
        seen: dict[str, str] = {}
        for role, name in _roles(self):
            if name in seen:
                where = f"twice as {role}" if seen[name] == role else (
                    f"both as {seen[name]} and as {role}")
                raise InputError(
                    f"column {name!r} is named {where}; a column can play only one role "
                    "and be listed once: remove the repeat"
                )
            seen[name] = role


def _roles(spec: Spec) -> list[tuple[str, str]]:
    """``(role, column)`` pairs for every used column, in a fixed order."""
    pairs = [("outcome", spec.outcome)]
    pairs += [("treatment", name) for name in spec.treatments]
    pairs += [("instrument", name) for name in spec.instruments]
    pairs += [("control", name) for name in spec.controls]
    pairs += [(role, getattr(spec, role)) for role in ("cluster", "weight")
              if getattr(spec, role) is not None]
    return pairs


def _used(spec: Spec) -> list[str]:
    return [name for _, name in _roles(spec)]


# --------------------------------------------------------------------------- results of this layer
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
    ``None``; ``n_dropped`` counts rows of this chunk dropped for a missing value.  A chunk
    may have zero rows when all of its rows were dropped.
    """

    values: np.ndarray
    weights: np.ndarray | None
    clusters: np.ndarray | None
    n_dropped: int


@dataclass(frozen=True, slots=True)
class Source:
    """A validated data set that can be read, chunk by chunk, any number of times.

    Build one with :func:`from_frame`, :func:`from_file`, :func:`from_chunks` or :func:`load`.
    """

    spec: Spec
    layout: Layout
    description: str
    _frames: Callable[[], Iterator[pd.DataFrame]] = field(repr=False, compare=False)
    _levels: dict[str, tuple[str, ...]] = field(repr=False, compare=False)
    # In-memory sources keep the chunks they validated, so later passes do not convert again.
    _cache: tuple[Chunk, ...] | None = field(default=None, repr=False, compare=False)

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
        tally = _Tally(self.spec, self.description)
        for frame in self._frames():
            yield _to_chunk(frame, self, tally)
        tally.finish()


# --------------------------------------------------------------------------- column checks
def _check_columns(spec: Spec, available: Sequence[Any], description: str) -> None:
    labels = [str(name) for name in available]
    problems = []
    for role, name in _roles(spec):
        count = sum(1 for label in available if label == name)
        if count > 1:
            raise InputError(
                f"{role} column {name!r} appears {count} times in {description}; "
                "rename the duplicates so that each column name is unique"
            )
        if count == 0:
            problems.append((role, name, _suggest(name, labels)))
    if not problems:
        return
    listed = ", ".join(repr(name) for name in labels[:MAX_LISTED_COLUMNS])
    if len(labels) > MAX_LISTED_COLUMNS:
        listed += f", ... ({len(labels) - MAX_LISTED_COLUMNS} more)"
    parts = []
    for role, name, close in problems:
        hint = f"; did you mean {' or '.join(map(repr, close))}?" if close else ""
        parts.append(f"{role} column {name!r} not found in {description}{hint}")
    message = "; ".join(parts)
    raise InputError(message + (" " if message.endswith("?") else "; ") + f"available: {listed}")


def _suggest(name: str, labels: list[str]) -> list[str]:
    same_case = [label for label in labels if label.lower() == name.lower()]
    close = difflib.get_close_matches(name, labels, n=MAX_SUGGESTIONS, cutoff=SUGGESTION_CUTOFF)
    return list(dict.fromkeys(same_case + close))[:MAX_SUGGESTIONS]


def _dtype_kind(dtype: Any) -> str:
    """``"numeric"`` (incl. bool), ``"text"`` (object, string, category) or ``"other"``."""
    import pandas as pd

    api = pd.api.types
    if api.is_bool_dtype(dtype) or (
            api.is_numeric_dtype(dtype) and not api.is_complex_dtype(dtype)):
        return "numeric"
    if isinstance(dtype, pd.CategoricalDtype) or api.is_string_dtype(dtype):
        return "text"
    return "other"


def _text_controls(spec: Spec, samples: Sequence[pd.DataFrame], description: str) -> list[str]:
    """Check that numeric roles are numeric and return the controls to treat as text."""
    numeric_roles = [(role, name) for role, name in _roles(spec)
                     if role not in ("control", "cluster")]
    for sample in samples:
        for role, name in numeric_roles:
            if _dtype_kind(sample[name].dtype) != "numeric":
                _as_float(sample[name], role, name, description, 0)  # raises with an example
    text = []
    for name in spec.controls:
        kinds = {_dtype_kind(sample[name].dtype) for sample in samples}
        if "other" in kinds:
            dtype = next(s[name].dtype for s in samples if _dtype_kind(s[name].dtype) == "other")
            raise InputError(
                f"control {name!r} in {description} has dtype {dtype}, which is neither "
                "numeric nor text; convert it to numbers (e.g. a year or a day count) or to "
                "strings to use it as a categorical control"
            )
        if "text" in kinds:
            text.append(name)
    return text


# --------------------------------------------------------------------------- value conversion
def _row(first_row: int, position: int) -> int:
    """1-based data row number (header not counted) for messages."""
    return first_row + position + 1


def _as_float(series: pd.Series, role: str, name: str, description: str,
              first_row: int) -> np.ndarray:
    """Numeric column as float64 with NaN for missing; InputError with an example if not."""
    import pandas as pd

    kind = _dtype_kind(series.dtype)
    if kind == "numeric":
        return series.to_numpy(dtype=np.float64, na_value=np.nan)
    what = f"{role} {name!r} in {description}"
    if kind == "other":
        raise InputError(
            f"{what} has dtype {series.dtype}, not numbers; convert it to numbers "
            "(e.g. a year or a day count) before the analysis"
        )
    raw = series.astype(object)
    if not raw.notna().any():  # e.g. an all-null column: missing, reported as NaN-only later
        return np.full(len(raw), np.nan)
    bad = (pd.to_numeric(raw, errors="coerce").isna() & raw.notna()).to_numpy()
    if bad.any():
        position = int(np.argmax(bad))
        raise InputError(
            f"{what} is not numeric: data row {_row(first_row, position)} holds "
            f"{raw.iloc[position]!r} ({int(bad.sum())} such value(s) in rows "
            f"{_row(first_row, 0)}-{_row(first_row, len(raw) - 1)}); recode them as numbers "
            "or leave missing values empty"
            + ("; text categories can only be controls" if role != "weight" else "")
        )
    example = raw[raw.notna()].iloc[0] if raw.notna().any() else None
    raise InputError(
        f"{what} holds numbers stored as text (e.g. {example!r}, dtype {series.dtype}); "
        "convert it with pandas.to_numeric before the analysis"
    )


def _missing(series: pd.Series) -> np.ndarray:
    """Missing mask; in text columns the empty string also counts as missing."""
    mask = np.array(series.isna(), dtype=bool)  # a writable copy
    if _dtype_kind(series.dtype) == "text":
        mask |= (series == "").to_numpy(dtype=bool, na_value=False)
    return mask


def _level_strings(series: pd.Series) -> np.ndarray:
    return series.astype(str).to_numpy(dtype=object)


class _Tally:
    """Row and missing-value counts over one pass, with the checks that need the whole pass."""

    def __init__(self, spec: Spec, description: str) -> None:
        self.roles = dict((name, role) for role, name in _roles(spec))
        self.description = description
        self.rows = 0
        self.kept = 0
        self.missing = dict.fromkeys(self.roles, 0)

    def add(self, rows: int, kept: int, missing: dict[str, int]) -> None:
        self.rows += rows
        self.kept += kept
        for name, count in missing.items():
            self.missing[name] += count

    def finish(self) -> None:
        where = self.description
        if self.rows == 0:
            raise InputError(f"{where} has no data rows; supply a data set with at least one row")
        empty = [name for name, count in self.missing.items() if count == self.rows]
        if empty:
            listed = ", ".join(f"{self.roles[name]} {name!r}" for name in empty)
            raise InputError(
                f"{listed} in {where} has no non-missing values (NaN-only in all "
                f"{self.rows} rows); check the column name and the file's missing-value "
                "coding, or remove the column from the model"
            )
        if self.kept == 0:
            worst = sorted(self.missing.items(), key=lambda item: -item[1])[:MAX_SUGGESTIONS]
            listed = ", ".join(f"{name!r} ({count} missing)" for name, count in worst)
            raise InputError(
                f"no rows left in {where} after dropping all {self.rows} rows for a missing "
                f"value in a used column; most missing: {listed}; drop or impute the columns "
                "with the most missing values"
            )


def _to_chunk(frame: pd.DataFrame, source: Source, tally: _Tally) -> Chunk:
    spec, layout, where = source.spec, source.layout, source.description
    first_row = tally.rows
    roles = dict((name, role) for role, name in _roles(spec))
    missing_counts: dict[str, int] = {}
    drop = np.zeros(len(frame), dtype=bool)
    numeric: dict[str, np.ndarray] = {}
    for name, role in roles.items():
        if name in source._levels or name == spec.cluster:
            mask = _missing(frame[name])
        else:
            numeric[name] = _as_float(frame[name], role, name, where, first_row)
            mask = np.isnan(numeric[name])
            infinite = np.isinf(numeric[name])
            if infinite.any():
                raise InputError(
                    f"{role} {name!r} in {where} has {int(infinite.sum())} infinite value(s) "
                    f"(first at data row {_row(first_row, int(np.argmax(infinite)))}); "
                    "recode them to finite numbers or drop those rows"
                )
        missing_counts[name] = int(mask.sum())
        drop |= mask
    if spec.weight is not None:
        bad = numeric[spec.weight] <= 0  # NaN compares False and is handled as missing
        if bad.any():
            position = int(np.argmax(bad))
            raise InputError(
                f"weight {spec.weight!r} in {where} has {int(bad.sum())} zero or negative "
                f"value(s) (e.g. {numeric[spec.weight][position]:g} at data row "
                f"{_row(first_row, position)}); weights must be positive: drop those rows or "
                "fix the weights"
            )
    keep = ~drop
    n_kept = int(keep.sum())
    tally.add(len(frame), n_kept, missing_counts)

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
        codes = np.asarray(
            _level_index(levels).get_indexer(_level_strings(frame[name][keep])))
        if (codes < 0).any():
            unknown = _level_strings(frame[name][keep])[int(np.argmax(codes < 0))]
            raise InputError(
                f"control {name!r} in {where} has level {unknown!r} in rows "
                f"{_row(first_row, 0)}-{_row(first_row, len(frame) - 1)} that was absent when "
                f"the levels {list(levels)} were scanned; the data changed between passes: "
                "reload it"
            )
        for code in range(1, len(levels)):
            values[:, j] = codes == code
            j += 1
    weights = clusters = None
    if spec.weight is not None:
        weights = np.ascontiguousarray(numeric[spec.weight][keep], dtype=np.float64)
    if spec.cluster is not None:
        clusters = frame[spec.cluster].to_numpy()[keep]
    return Chunk(values, weights, clusters, len(frame) - n_kept)


def _level_index(levels: tuple[str, ...]) -> pd.Index:
    import pandas as pd

    return pd.Index(levels, dtype=object)


# --------------------------------------------------------------------------- building a source
def _scan_levels(frames: Callable[[], Iterator[pd.DataFrame]], spec: Spec, text: list[str],
                 description: str) -> dict[str, tuple[str, ...]]:
    """One cheap pass: levels of each text control among rows kept by listwise deletion."""
    used = _used(spec)
    found: dict[str, set[str]] = {name: set() for name in text}
    tally = _Tally(spec, description)
    for frame in frames():
        masks = {name: _missing(frame[name]) for name in used}
        drop = np.logical_or.reduce(list(masks.values()))
        tally.add(len(frame), int((~drop).sum()),
                  {name: int(mask.sum()) for name, mask in masks.items()})
        for name in text:
            found[name].update(_level_strings(frame[name][~drop]))
    tally.finish()
    levels = {}
    for name in text:
        levels[name] = tuple(sorted(found[name]))
        if len(levels[name]) < 2:
            raise InputError(
                f"control {name!r} in {description} takes the single value "
                f"{levels[name][0]!r} in the {tally.kept} rows kept after dropping "
                f"{tally.rows - tally.kept} rows with missing values; a constant control "
                "carries no information: remove it from the controls"
            )
    return levels


def _build(spec: Spec, description: str, available: Sequence[Any],
           samples: Callable[[], Sequence[pd.DataFrame]],
           make_frames: Callable[[list[str]], Callable[[], Iterator[pd.DataFrame]]],
           *, eager: bool) -> Source:
    """Shared steps: column names, kinds, levels, layout; ``eager`` validates every row now."""
    if not isinstance(spec, Spec):
        raise InputError(f"spec must be a sensiv.data.Spec; got {type(spec).__name__}")
    _check_columns(spec, available, description)
    text = _text_controls(spec, samples(), description)
    frames = make_frames(text)
    levels = _scan_levels(frames, spec, text, description) if text else {}
    controls: list[str] = []
    for name in spec.controls:
        controls += [f"{name}[{level}]" for level in levels[name][1:]] if name in levels else [name]
    layout = Layout(spec.outcome, spec.treatments, spec.instruments, tuple(controls),
                    tuple((name, levels[name][1:]) for name in text), spec.constant)
    clash = {name for name in layout.columns if layout.columns.count(name) > 1}
    clash |= set(controls) & {spec.cluster, spec.weight} - {None}
    if clash:
        raise InputError(
            f"indicator column name(s) {sorted(clash)} in {description} clash with other "
            "columns; rename the text control or the clashing column"
        )
    source = Source(spec, layout, description, frames, levels)
    if eager:
        return dataclasses.replace(source, _cache=tuple(source.chunks()))
    return source


def _check_chunk_rows(chunk_rows: Any) -> int:
    if isinstance(chunk_rows, bool) or not isinstance(chunk_rows, (int, np.integer)) \
            or chunk_rows < 1:
        raise InputError(f"chunk_rows must be a positive integer; got {chunk_rows!r}")
    return int(chunk_rows)


def _check_frame(frame: Any, what: str) -> None:
    import pandas as pd

    if not isinstance(frame, pd.DataFrame):
        raise InputError(f"{what} must be a pandas DataFrame; got {type(frame).__name__}")


def from_frame(frame: pd.DataFrame, spec: Spec, *, chunk_rows: int | None = None) -> Source:
    """In-memory source; ``chunk_rows=None`` yields the whole frame as one chunk.

    Every row is validated here, so a bad value raises now rather than later.

    Raises
    ------
    InputError
        Unknown column, non-numeric, infinite or NaN-only column, bad weights, or no rows left.
    """
    _check_frame(frame, "frame")
    rows = None if chunk_rows is None else _check_chunk_rows(chunk_rows)
    used = _used(spec) if isinstance(spec, Spec) else []

    def make_frames(text: list[str]) -> Callable[[], Iterator[pd.DataFrame]]:
        def frames() -> Iterator[pd.DataFrame]:
            step = rows or max(len(frame), 1)
            sub = frame[used]
            for start in range(0, len(frame), step):
                yield sub.iloc[start:start + step]
            if len(frame) == 0:
                yield sub
        return frames

    return _build(spec, "DataFrame", list(frame.columns), lambda: [frame], make_frames,
                  eager=True)


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
    used = _used(spec) if isinstance(spec, Spec) else []

    def make_frames(text: list[str]) -> Callable[[], Iterator[pd.DataFrame]]:
        return lambda: (frame[used] for frame in frames)

    return _build(spec, description, common, lambda: list(frames), make_frames, eager=True)


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
    return [str(name) for name in columns]


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

    Only the used columns are read.  Column names, numeric roles and text controls are
    checked from the first rows now; values of later rows are checked as their chunk is
    reached, so iterating :meth:`Source.chunks` may raise InputError part-way.  When there are
    text controls, one extra pass over the used columns fixes their levels.

    Raises
    ------
    InputError
        Any problem with the path, the file or its columns.
    """
    resolved, fmt = _file(path)
    rows = _check_chunk_rows(chunk_rows)
    available = _header(resolved, fmt)
    used = _used(spec) if isinstance(spec, Spec) else []

    def samples() -> list[pd.DataFrame]:
        first = next(_reader(resolved, fmt, used, TYPE_SAMPLE_ROWS)(), None)
        if first is None or len(first) == 0:
            raise InputError(f"'{resolved.name}' has columns but no data rows; supply a file "
                             "with at least one row")
        return [first]

    def make_frames(text: list[str]) -> Callable[[], Iterator[pd.DataFrame]]:
        labels = [*text, spec.cluster] if spec.cluster is not None else text
        return _reader(resolved, fmt, used, rows, labels)

    return _build(spec, resolved.name, available, samples, make_frames, eager=False)


def load(path_or_frame: Any, spec: Spec, *, chunk_rows: int | None = None) -> Source:
    """A DataFrame goes to :func:`from_frame`, anything else is a path for :func:`from_file`."""
    import pandas as pd

    if isinstance(path_or_frame, pd.DataFrame):
        return from_frame(path_or_frame, spec, chunk_rows=chunk_rows)
    return from_file(path_or_frame, spec,
                     chunk_rows=DEFAULT_CHUNK_ROWS if chunk_rows is None else chunk_rows)
