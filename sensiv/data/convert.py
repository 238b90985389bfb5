"""Column-level conversion of a pandas frame to clean numbers: dtype kinds, numeric columns as
``float64`` with NaN for missing, missing-value masks, the levels of text controls, and the
row tallies whose checks need a whole pass over the data.

In text columns an empty string counts as missing, as it does in Stata.  Every message names
the column, its role, the data set and a data row (1-based, header not counted).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterator, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

from sensiv.core.errors import ConstantControlError, InputError
from sensiv.core.limits import MAX_MAGNITUDE
from sensiv.data.spec import MAX_SUGGESTIONS, Spec, roles, used_columns

if TYPE_CHECKING:
    import pandas as pd


def dtype_kind(dtype: Any) -> str:
    """``"numeric"`` (incl. bool), ``"text"`` (object, string, category) or ``"other"``."""
    import pandas as pd

    api = pd.api.types
    if api.is_bool_dtype(dtype) or (
            api.is_numeric_dtype(dtype) and not api.is_complex_dtype(dtype)):
        return "numeric"
    if isinstance(dtype, pd.CategoricalDtype) or api.is_string_dtype(dtype):
        return "text"
    return "other"


def text_controls(spec: Spec, samples: Sequence[pd.DataFrame], description: str) -> list[str]:
    """Check that numeric roles are numeric and return the controls to treat as text."""
    numeric_roles = [(role, name) for role, name in roles(spec)
                     if role not in ("control", "cluster", "absorbed fixed effect")]
    for sample in samples:
        for role, name in numeric_roles:
            if dtype_kind(sample[name].dtype) != "numeric":
                as_float(sample[name], role, name, description, 0)  # raises with an example
    text = []
    for name in spec.controls:
        kinds = {dtype_kind(sample[name].dtype) for sample in samples}
        if "other" in kinds:
            dtype = next(s[name].dtype for s in samples if dtype_kind(s[name].dtype) == "other")
            raise InputError(
                f"control {name!r} in {description} has dtype {dtype}, which is neither "
                "numeric nor text; convert it to numbers (e.g. a year or a day count) or to "
                "strings to use it as a categorical control"
            )
        if "text" in kinds or name in spec.categorical:
            text.append(name)
    return text


IDENTIFIER_SHARE = 0.05
IDENTIFIER_LEVELS = 50
IDENTIFIER_SAMPLE_ROWS = 100_000  # leading rows of each sample that the check reads
"""An integer control with more distinct values than this share of rows and this count
looks like an identifier (common practice, no source: thresholds named in the issue)."""


def identifier_notes(spec: Spec, samples: Sequence[pd.DataFrame], text: Sequence[str],
                     description: str) -> list[str]:
    """Notes for numeric controls that look like identifiers (integer codes with many
    distinct values), judged on the sampled leading rows."""
    notes = []
    for name in spec.controls:
        if name in text:
            continue
        values = np.concatenate([as_float(s[name].iloc[:IDENTIFIER_SAMPLE_ROWS], "control",
                                          name, description, 0) for s in samples])
        values = values[np.isfinite(values)]
        if values.size == 0 or not np.all(values == np.round(values)):
            continue
        distinct = len(np.unique(values))
        if distinct > IDENTIFIER_LEVELS and distinct > IDENTIFIER_SHARE * values.size:
            notes.append(
                f"control {name!r} in {description} holds integer codes with {distinct} "
                f"distinct values in {values.size} rows, so it looks like an identifier; as a "
                "control it enters linearly, which is rarely meant: use --absorb or "
                "--categorical")
    return notes


def data_row(first_row: int, position: int) -> int:
    """1-based data row number (header not counted) for messages."""
    return first_row + position + 1


def as_float(series: pd.Series, role: str, name: str, description: str,
             first_row: int) -> np.ndarray:
    """Numeric column as float64 with NaN for missing; InputError with an example if not."""
    import pandas as pd

    kind = dtype_kind(series.dtype)
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
            f"{what} is not numeric: data row {data_row(first_row, position)} holds "
            f"{raw.iloc[position]!r} ({int(bad.sum())} such value(s) in rows "
            f"{data_row(first_row, 0)}-{data_row(first_row, len(raw) - 1)}); recode them as "
            "numbers or leave missing values empty"
            + ("; text categories can only be controls" if role != "weight" else "")
        )
    example = raw[raw.notna()].iloc[0] if raw.notna().any() else None
    raise InputError(
        f"{what} holds numbers stored as text (e.g. {example!r}, dtype {series.dtype}); "
        "convert it with pandas.to_numeric before the analysis"
    )


def extremes(values: np.ndarray) -> tuple[float, float]:
    """The smallest and largest value, NaN ignored (NaN, NaN when no value is a number); two
    reductions without temporaries, so a column is checked at the speed of reading it."""
    if values.size == 0:
        return math.nan, math.nan
    return float(np.fmin.reduce(values)), float(np.fmax.reduce(values))


def check_scale(values: np.ndarray, what: str, first_row: int,
                found: tuple[float, float] | None = None) -> None:
    """Refuse values whose magnitude double precision cannot square and sum (above
    :data:`~sensiv.core.limits.MAX_MAGNITUDE`, or non-zero and all below its reciprocal):
    their spread would over- or underflow and the column would look constant.  ``found``:
    the column's :func:`extremes`, when the caller has them."""
    lowest, highest = extremes(values) if found is None else found
    if math.isnan(lowest):
        return
    largest = max(abs(lowest), abs(highest)) if math.isfinite(lowest + highest) else math.inf
    if largest > MAX_MAGNITUDE:
        position = int(np.argmax(np.abs(np.nan_to_num(values)) > MAX_MAGNITUDE))
        raise InputError(f"{what} holds {values[position]:g} at data row "
                         f"{data_row(first_row, position)}, out of the range this analysis can "
                         f"handle (magnitudes up to {MAX_MAGNITUDE:g}); rescale the column "
                         "(e.g. divide it by a power of ten) and read the estimates in the new "
                         "unit")
    if 0.0 < largest < 1.0 / MAX_MAGNITUDE:
        raise InputError(f"{what} holds only values below {1.0 / MAX_MAGNITUDE:g} in size "
                         f"(largest {largest:g}), out of the range this analysis can handle: "
                         "their spread would underflow; rescale the column (e.g. multiply it "
                         "by a power of ten) and read the estimates in the new unit")


def missing_mask(series: pd.Series) -> np.ndarray:
    """Missing mask; in text columns the empty string also counts as missing."""
    mask = np.array(series.isna(), dtype=bool)  # a writable copy
    if dtype_kind(series.dtype) == "text":
        mask |= (series == "").to_numpy(dtype=bool, na_value=False)
    return mask


def level_strings(series: pd.Series, numeric: bool = False) -> np.ndarray:
    """The labels of a text control as Python strings (the form its levels are kept in).

    With ``numeric`` (an integer-coded categorical control) numbers are written the same way
    whether a chunk holds them as integers or floats (``3`` and ``3.0`` are both ``"3"``).
    """
    labels = series.astype(str).to_numpy(dtype=object)
    if numeric:  # numbers read as text ("2.0" from a CSV) get the same label as numbers
        import pandas as pd

        values = pd.to_numeric(series, errors="coerce").to_numpy(dtype=np.float64,
                                                                 na_value=np.nan)
        finite = np.isfinite(values)
        unique, inverse = np.unique(values[finite], return_inverse=True)
        labels[finite] = np.array([format(v, ".15g") for v in unique], dtype=object)[inverse]
    return labels


def level_order(labels: set[str], numeric: bool) -> tuple[str, ...]:
    """Levels sorted as ``str``, or by their numbers for a numeric categorical control."""
    if numeric:
        try:
            return tuple(sorted(labels, key=float))
        except ValueError:
            pass
    return tuple(sorted(labels))


def level_index(levels: tuple[str, ...]) -> pd.Index:
    """An index over the kept levels, to turn labels into level codes in one call."""
    import pandas as pd

    return pd.Index(levels, dtype=object)


class Tally:
    """Row and missing-value counts over one pass, with the checks that need the whole pass."""

    def __init__(self, spec: Spec, description: str) -> None:
        self.roles = dict((name, role) for role, name in roles(spec))
        self.description = description
        self.rows = 0
        self.kept = 0
        self.filtered = 0
        self.where = spec.where
        self.missing = dict.fromkeys(self.roles, 0)

    def add(self, rows: int, kept: int, missing: dict[str, int], filtered: int = 0) -> None:
        self.filtered += filtered
        self.rows += rows
        self.kept += kept
        for name, count in missing.items():
            self.missing[name] += count

    def finish(self) -> None:
        where = self.description
        if self.rows == 0 and self.filtered:
            raise InputError(
                f"the row filter {self.where!r} keeps none of the {self.filtered} rows of "
                f"{where}; loosen the filter (check its values and the columns' coding)")
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


def scan_levels(frames: Callable[[], Iterator[pd.DataFrame]], spec: Spec, text: list[str],
                description: str, keep: Callable[[pd.DataFrame], np.ndarray] | None = None
                ) -> dict[str, tuple[str, ...]]:
    """One cheap pass: levels of each text control among rows kept by the row filter
    (``keep`` gives the mask of a frame) and listwise deletion."""
    used = used_columns(spec)
    found: dict[str, set[str]] = {name: set() for name in text}
    tally = Tally(spec, description)
    for frame in frames():
        filtered = 0
        if keep is not None:
            mask = keep(frame)
            filtered = int((~mask).sum())
            frame = frame[mask]
        masks = {name: missing_mask(frame[name]) for name in used}
        drop = np.logical_or.reduce(list(masks.values()))
        tally.add(len(frame), int((~drop).sum()),
                  {name: int(mask.sum()) for name, mask in masks.items()}, filtered)
        for name in text:
            found[name].update(level_strings(frame[name][~drop], name in spec.categorical))
    tally.finish()
    levels = {}
    for name in text:
        levels[name] = level_order(found[name], name in spec.categorical)
        if len(levels[name]) < 2:
            raise ConstantControlError(
                f"control {name!r} in {description} takes the single value "
                f"{levels[name][0]!r} in the {tally.kept} rows kept after dropping "
                f"{tally.rows - tally.kept} rows with missing values; a constant control "
                "carries no information: remove it from the controls", name)
    return levels
