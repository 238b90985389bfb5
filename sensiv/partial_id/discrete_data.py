"""Counts tables for the discrete bounds: P(y, x | z) from individual rows or from a table of
counts, with the level limits checked at the boundary.

A :class:`CountsTable` holds the counts ``n[z, x, y]`` on the sorted levels of the instrument
``Z``, the treatment ``X`` and the outcome ``Y``.  Individual-level data come through the data
layer (:func:`tabulate` on a :class:`sensiv.data.Source`, listwise deletion of missing values
as everywhere in sensiv); a table of counts is a frame or file with one row per cell and a
``count`` column (:func:`counts_from_frame`, :func:`read_counts`).  A cell listed twice is
refused (summing it silently would hide a copy-and-paste mistake).

The levels of a counts table are the values it lists, including cells with a zero count:
listing ``y = 2`` with count 0 declares 2 a possible outcome, which widens the bounds.  With
individual rows the levels are the values observed.

Examples
--------
>>> import pandas as pd
>>> frame = pd.DataFrame({"z": [0, 0, 1, 1], "x": [0, 1, 0, 1], "y": [1, 0, 1, 1],
...                       "count": [30, 10, 5, 55]})
>>> table = counts_from_frame(frame, outcome="y", treatment="x", instrument="z")
>>> table.n, table.counts[1, 1].tolist()
(100, [0, 55])
"""

from __future__ import annotations

import difflib
import os
from collections.abc import Iterable
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING

import numpy as np

from sensiv.core.errors import InputError
from sensiv.core.results import with_article

if TYPE_CHECKING:
    import pandas as pd

    from sensiv.data import Source

MAX_INSTRUMENT_LEVELS = 4
MAX_TREATMENT_LEVELS = 3
MAX_OUTCOME_LEVELS = 4
MAX_INSTRUMENT_LEVELS_WITH_3_TREATMENTS = 3
"""A 3-level treatment with a 4-level instrument gives about 2,400-4,400 variables per copy of
the programme and some 100 ms per solve: too slow for a bootstrap, so it is refused."""
COUNT_COLUMN = "count"

_ROLES = {
    # role: (argument name, option name, largest number of levels)
    "instrument": ("instrument", "--instrument", MAX_INSTRUMENT_LEVELS),
    "treatment": ("treatment", "--treatment", MAX_TREATMENT_LEVELS),
    "outcome": ("outcome", "--outcome", MAX_OUTCOME_LEVELS),
}


@dataclass(frozen=True, slots=True, eq=False)
class CountsTable:
    """Counts ``n[z, x, y]`` of a discrete instrument, treatment and outcome.

    Attributes
    ----------
    outcome, treatment, instrument : str
        Column names.
    instrument_levels, treatment_levels, outcome_levels : tuple of float
        Sorted levels; ``counts`` is indexed by their positions.  The outcome levels are also
        the numbers whose mean the effect is about.
    counts : ndarray of int64, shape (K, J, L)
        ``counts[k, j, l]`` units with ``Z = instrument_levels[k]``, ``X = treatment_levels[j]``
        and ``Y = outcome_levels[l]``; every level of ``Z`` has at least one unit.
    n_dropped : int
        Rows dropped for a missing value (individual-level data only).
    n_filtered : int
        Rows removed by the row filter before that (individual-level data only).
    description : str
        Where the table came from, for messages and reports.
    """

    outcome: str
    treatment: str
    instrument: str
    instrument_levels: tuple[float, ...]
    treatment_levels: tuple[float, ...]
    outcome_levels: tuple[float, ...]
    counts: np.ndarray = field(repr=False)
    n_dropped: int = 0
    description: str = "counts table"
    n_filtered: int = 0

    @property
    def n(self) -> int:
        return int(self.counts.sum())

    @property
    def shape(self) -> tuple[int, int, int]:
        """``(K, J, L)``: numbers of levels of ``Z``, ``X`` and ``Y``."""
        return tuple(int(s) for s in self.counts.shape)  # type: ignore[return-value]

    def to_dict(self) -> dict:
        return {
            "outcome": self.outcome,
            "treatment": self.treatment,
            "instrument": self.instrument,
            "levels": {
                "instrument": [plain_number(v) for v in self.instrument_levels],
                "treatment": [plain_number(v) for v in self.treatment_levels],
                "outcome": [plain_number(v) for v in self.outcome_levels],
            },
            "counts": [
                {"instrument": plain_number(z), "treatment": plain_number(x),
                 "outcome": plain_number(y), "count": int(self.counts[k, j, m])}
                for k, z in enumerate(self.instrument_levels)
                for j, x in enumerate(self.treatment_levels)
                for m, y in enumerate(self.outcome_levels)
            ],
            "n": self.n,
            "n_dropped": self.n_dropped,
            "n_filtered": self.n_filtered,
        }


def plain_number(value: float) -> float | int:
    """A level for JSON and text: integral values as ``int``."""
    return int(value) if float(value).is_integer() else float(value)


# --------------------------------------------------------------------------- building tables
def _check_levels(levels: np.ndarray, role: str, name: str, where: str,
                  at_least: bool = False) -> None:
    argument, option, limit = _ROLES[role]
    count = len(levels)
    if count > limit:
        more = "at least " if at_least else ""
        shown = ", ".join(str(plain_number(v)) for v in levels[:6]) + (", ..." if count > 6 else "")
        raise InputError(
            f"{role} {name!r} in {where} takes {more}{count} distinct values ({shown}); the "
            f"discrete bounds handle {with_article(role)} with 2 to {limit} levels: recode {option} into "
            f"at most {limit} groups"
            + (", or use `sensiv fit` for a continuous instrument" if role == "instrument"
               else "")
        )
    if count < 2:
        shown = str(plain_number(levels[0])) if count else "no value"
        raise InputError(
            f"{role} {name!r} in {where} takes a single value ({shown}); the discrete bounds "
            f"need {with_article(role)} with 2 to {limit} levels: check the {option} column"
        )


def _table(z: np.ndarray, x: np.ndarray, y: np.ndarray, weights: np.ndarray,
           names: tuple[str, str, str], n_dropped: int, where: str) -> CountsTable:
    """Counts on the sorted levels of ``z``, ``x``, ``y`` (levels already checked by count)."""
    outcome, treatment, instrument = names
    levels = []
    codes = []
    for values, role, name in ((z, "instrument", instrument), (x, "treatment", treatment),
                               (y, "outcome", outcome)):
        unique, code = np.unique(values, return_inverse=True)
        _check_levels(unique, role, name, where)
        levels.append(tuple(float(v) for v in unique))
        codes.append(code)
    shape = tuple(len(lv) for lv in levels)
    if shape[1] > 2 and shape[0] > MAX_INSTRUMENT_LEVELS_WITH_3_TREATMENTS:
        raise InputError(
            f"treatment {treatment!r} in {where} has {shape[1]} levels and instrument "
            f"{instrument!r} has {shape[0]}: with a treatment of more than 2 levels the "
            f"instrument may have at most {MAX_INSTRUMENT_LEVELS_WITH_3_TREATMENTS} levels "
            "(beyond that the programme grows past a few thousand variables per solve); "
            "merge two levels of the instrument or of the treatment"
        )
    counts = np.zeros(shape, dtype=np.int64)
    np.add.at(counts, tuple(codes), weights.astype(np.int64))
    per_z = counts.sum(axis=(1, 2))
    empty = [levels[0][k] for k in range(shape[0]) if per_z[k] == 0]
    if empty:
        listed = ", ".join(str(plain_number(v)) for v in empty)
        raise InputError(
            f"instrument {instrument!r} in {where} has level(s) {listed} with no observations "
            "(all counts 0); P(y, x | z) is undefined there: drop those rows or merge the "
            "level with a neighbouring one"
        )
    return CountsTable(outcome, treatment, instrument, *levels, counts=counts,
                       n_dropped=n_dropped, description=where)


def tabulate(source: Source) -> CountsTable:
    """Counts table from individual-level data read through :mod:`sensiv.data`.

    ``source.spec`` names one outcome, one treatment and one instrument (controls, clusters
    and weights are not used by the discrete bounds).  Rows with a missing value are dropped
    (listwise, counted in ``n_dropped``).  Reading stops as soon as a column shows more levels
    than the limit.

    Raises
    ------
    InputError
        More than one treatment or instrument, controls or weights given, too many or too few
        levels, or any data-layer problem.
    """
    spec = source.spec
    where = source.description
    if len(spec.treatments) != 1 or len(spec.instruments) != 1:
        raise InputError(
            f"the discrete bounds take one treatment and one instrument; got treatments "
            f"{list(spec.treatments)} and instruments {list(spec.instruments)}: name one each"
        )
    if spec.controls or spec.weight is not None or spec.cluster is not None:
        raise InputError(
            "the discrete bounds use no controls, weights or clusters (Z is assumed "
            "randomised); remove them from the Spec"
        )
    from sensiv.estimation.passes import cells_of

    names = (spec.outcome, spec.treatments[0], spec.instruments[0])
    roles = ("outcome", "treatment", "instrument")
    found = cells_of(source, tuple(_ROLES[role][2] for role in roles))
    for column in (2, 1, 0):  # the instrument's message first, as the columns are checked
        if len(found.seen[column]) > found.limits[column]:
            _check_levels(np.array(found.seen[column]), roles[column], names[column], where,
                          at_least=True)
    keys = np.array(list(found.counts), dtype=np.float64).reshape(-1, 3)
    weights = np.array(list(found.counts.values()), dtype=np.int64)
    table = _table(keys[:, 0], keys[:, 1], keys[:, 2], weights, names, found.dropped, where)
    return replace(table, n_filtered=found.filtered)


def counts_from_frame(frame: pd.DataFrame, *, outcome: str, treatment: str, instrument: str,
                      count: str = COUNT_COLUMN, description: str = "the counts table"
                      ) -> CountsTable:
    """Counts table from a frame with one row per cell: ``instrument``, ``treatment``,
    ``outcome`` and a ``count`` column of non-negative integers.

    Raises
    ------
    InputError
        Missing columns, non-numeric or missing values, negative or non-integer counts, too
        many or too few levels, or a level of the instrument with no observations.
    """
    import pandas as pd

    if not isinstance(frame, pd.DataFrame):
        raise InputError(f"the counts table must be a pandas DataFrame; got "
                         f"{type(frame).__name__}")
    roles = (("instrument", instrument), ("treatment", treatment), ("outcome", outcome),
             ("count", count))
    labels = [str(c) for c in frame.columns]
    for role, name in roles:
        if name not in labels:
            close = difflib.get_close_matches(str(name), labels, n=3, cutoff=0.6)
            hint = f"; did you mean {' or '.join(map(repr, close))}?" if close else ""
            raise InputError(
                f"{role} column {name!r} not found in {description}{hint}; a counts table "
                f"needs the columns {instrument!r}, {treatment!r}, {outcome!r} and {count!r} "
                f"(available: {', '.join(map(repr, labels[:25]))})"
            )
    if len(frame) == 0:
        raise InputError(f"{description} has no rows; list one row per (z, x, y) cell with "
                         f"its {count!r}")
    arrays = {}
    for role, name in roles:
        raw = frame[name]
        values = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=np.float64,
                                                              na_value=np.nan)
        bad = np.isnan(values) | np.isinf(values)
        if bad.any():
            row = int(np.argmax(bad))
            raise InputError(
                f"{role} column {name!r} in {description} has {int(bad.sum())} missing, "
                f"infinite or non-numeric value(s) (first at data row {row + 1}: "
                f"{raw.iloc[row]!r}); every cell of a counts table needs a number: fix or "
                "remove those rows"
            )
        arrays[role] = values
    counts = arrays["count"]
    negative = counts < 0
    fractional = counts != np.round(counts)
    for mask, what in ((negative, "negative"), (fractional, "non-integer")):
        if mask.any():
            row = int(np.argmax(mask))
            raise InputError(
                f"count column {count!r} in {description} has {int(mask.sum())} {what} "
                f"value(s) (e.g. {plain_number(counts[row])} at data row {row + 1}); counts must "
                "be whole numbers 0, 1, 2, ...: fix the table (shares or weights are not counts)"
            )
    _refuse_repeated_cells(arrays, (instrument, treatment, outcome), description)
    return _table(arrays["instrument"], arrays["treatment"], arrays["outcome"],
                  counts.astype(np.int64), (outcome, treatment, instrument), 0, description)


def _refuse_repeated_cells(arrays: dict, names: tuple[str, str, str], description: str) -> None:
    cells = np.column_stack([arrays["instrument"], arrays["treatment"], arrays["outcome"]])
    _, first, counts = np.unique(cells, axis=0, return_index=True, return_counts=True)
    if (counts > 1).any():
        rows = np.sort(first[counts > 1])
        cell = cells[rows[0]]
        again = [i + 1 for i in range(len(cells)) if (cells[i] == cell).all()]
        shown = ", ".join(f"{n} = {plain_number(v)}" for n, v in zip(names, cell))
        raise InputError(f"{description} lists the cell ({shown}) {len(again)} times (data "
                         f"rows {', '.join(map(str, again[:5]))}); {int((counts > 1).sum())} "
                         "cell(s) repeat: give each (instrument, treatment, outcome) cell once, "
                         "with its total count")


def read_counts(path: str | os.PathLike[str], *, outcome: str, treatment: str,
                instrument: str, count: str = COUNT_COLUMN) -> CountsTable:
    """Counts table from a CSV / Parquet / Stata file (see :func:`counts_from_frame`)."""
    from pathlib import Path

    from sensiv.data import read_table

    frame = read_table(path)
    return counts_from_frame(frame, outcome=outcome, treatment=treatment,
                             instrument=instrument, count=count,
                             description=f"counts table '{Path(path).name}'")


def from_counts(counts: Iterable, *, instrument_levels: Iterable[float] | None = None,
                treatment_levels: Iterable[float] | None = None,
                outcome_levels: Iterable[float] | None = None, outcome: str = "y",
                treatment: str = "x", instrument: str = "z") -> CountsTable:
    """Counts table from an array ``counts[z, x, y]`` (levels default to 0, 1, ...).

    Raises
    ------
    InputError
        Not a 3-dimensional array of non-negative whole numbers, level lists of the wrong
        length or not increasing, too many or too few levels, or a level of ``Z`` with no
        observations.
    """
    array = np.asarray(counts, dtype=np.float64)
    if array.ndim != 3:
        raise InputError(f"counts must be a 3-dimensional array indexed [z, x, y]; got shape "
                         f"{array.shape}")
    if not np.all(np.isfinite(array)) or (array < 0).any() or (array != np.round(array)).any():
        raise InputError("counts must be finite whole numbers 0, 1, 2, ...; got "
                         f"{array.ravel()[:8].tolist()}...")
    levels = []
    for given, size, role in ((instrument_levels, array.shape[0], "instrument"),
                              (treatment_levels, array.shape[1], "treatment"),
                              (outcome_levels, array.shape[2], "outcome")):
        values = np.arange(size, dtype=np.float64) if given is None else np.asarray(
            list(given), dtype=np.float64)
        if values.shape != (size,) or (np.diff(values) <= 0).any():
            raise InputError(f"{role}_levels must be {size} increasing numbers (one per "
                             f"index of counts); got {values.tolist()}")
        levels.append(values)
    z, x, y = np.meshgrid(*levels, indexing="ij")
    return _table(z.ravel(), x.ravel(), y.ravel(), array.ravel().astype(np.int64),
                  (outcome, treatment, instrument), 0, "the counts array")
