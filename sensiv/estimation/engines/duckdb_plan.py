"""The DuckDB engine's plan of one source: the connection, the filtered rows and the data
expressions (:class:`Plan`), and the numpy path's value checks as SQL aggregates
(:func:`checks`, :func:`quick_parts`, :func:`check_verdict`), used by :mod:`.duckdb_engine`."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from sensiv.core.errors import InputError
from sensiv.core.limits import MAX_MAGNITUDE
from sensiv.data.convert import Tally
from sensiv.data.datasets import missing_extra, quoted
from sensiv.data.spec import read_columns, roles
from sensiv.estimation.absorb_view import GroupAbsorbed
from sensiv.estimation.engines.duckdb_sql import (PANDAS_MISSING, Query, filter_sql, indicator,
                                                  is_numeric, missing, number)

CLEAN = "sensiv_clean_row_"
"""The checks' flag of a row without a missing value, computed once per row (not once per
aggregate that filters on it)."""


def duckdb_module() -> Any:
    try:
        import duckdb
    except ImportError as exc:
        raise missing_extra("duckdb") from exc
    return duckdb


def open_relation(source) -> tuple[Any, str, list]:
    """A connection, the FROM clause and its parameters for the source's raw rows."""
    duckdb = duckdb_module()
    origin = source.origin
    if origin is None:
        raise InputError(f"--engine duckdb cannot read {source.description}; convert it to "
                         "Parquet or choose --engine numpy")
    if origin.kind == "duckdb":
        return duckdb.connect(origin.paths[0], read_only=True), quoted(origin.table), []
    hive = "true" if origin.hive else "false"
    if origin.kind == "parquet":
        return duckdb.connect(), f"read_parquet(?, hive_partitioning = {hive})", \
            [list(origin.paths)]
    return duckdb.connect(), (f"read_csv(?, header = true, hive_partitioning = {hive}, "
                              "nullstr = ?)"), [list(origin.paths), PANDAS_MISSING]


class Plan:
    """The SQL pieces of one source: column kinds, the filtered rows, the data expressions."""

    def __init__(self, source) -> None:
        self.view = source if isinstance(source, GroupAbsorbed) else None
        source = source.base if self.view is not None else source
        self.source = source
        self.connection, relation, params = open_relation(source)
        spec = source.spec
        used = read_columns(spec)
        listed = ", ".join(quoted(c) for c in used)
        types = dict(self.connection.execute(
            f"SELECT column_name, column_type FROM (DESCRIBE SELECT {listed} FROM {relation})",
            params).fetchall())
        self.numeric = {c: is_numeric(types[c]) for c in used}
        query = Query(list(params))
        where = ""
        if source.row_filter is not None:
            tree, kinds = source.row_filter
            where = f" WHERE {filter_sql(tree, kinds, query)}"
        self.kept = f"(SELECT {listed} FROM {relation}{where})"
        self.total = f"(SELECT count(*) FROM {relation})"
        self.kept_params = query.params
        self.params = list(params)
        levels = source.levels
        self.text = set(levels)
        self.role_columns = [name for _, name in roles(spec)]
        any_missing = " OR ".join(missing(c, self.numeric[c]) for c in self.role_columns)
        self.clean_condition = f"NOT ({any_missing})"
        any_null = " OR ".join(f"{quoted(c)} IS NULL" if self.numeric[c] else missing(c, False)
                               for c in self.role_columns)
        self.quick_clean = f"NOT ({any_null})"     # the same where no value is NaN
        values = Query()
        self.values = []
        self.value_index = {}   # numeric column -> its index among the values
        for name in (spec.outcome, *spec.treatments, *spec.instruments, *spec.controls):
            if name not in levels:
                self.value_index.setdefault(name, len(self.values))
                self.values.append(number(name))
                continue
            numeric_levels = name in spec.categorical
            for level in levels[name][1:]:
                self.values.append(indicator(name, level, numeric_levels and _floatable(level),
                                             values))
        self.value_params = values.params
        self.weight = number(spec.weight) if spec.weight is not None else None

    def run(self, sql: str, params: list) -> Any:
        duckdb = duckdb_module()
        try:
            return self.connection.execute(sql, params)
        except duckdb.Error as exc:
            raise InputError(f"DuckDB could not read {self.source.description}: {exc}; check "
                             "that every file is complete and valid (re-export it, or move it "
                             "out of the data set), or choose --engine numpy") from exc

    @property
    def width(self) -> int:
        """Model columns of the rows :meth:`clean_rows` gives (fewer when controls are absorbed)."""
        return len(self.view.stream.keep_columns) if self.view is not None else len(self.values)

    def raw_rows(self, extra: str = "") -> tuple[str, list]:
        """SELECT of the clean raw rows: ``w``, ``v0 … v{p-1}`` (and ``extra`` columns)."""
        weight = self.weight or "1.0"
        columns = ", ".join(f"{v} AS v{j}" for j, v in enumerate(self.values))
        sql = (f"SELECT {weight} AS w, {columns}{extra} FROM {self.kept} AS kept "
               f"WHERE {self.clean_condition}")
        return sql, self.value_params + self.kept_params

    def clean_rows(self, extra: str = "") -> tuple[str, list]:
        """The rows the passes read: the raw rows, or with one absorbed fixed effect the rows of
        levels met more than once, each kept column minus its weighted level mean (a join with
        the per-level sums, a GROUP BY)."""
        if self.view is None:
            return self.raw_rows(extra)
        effect = quoted(self.source.spec.absorb[0])
        raw, params = self.raw_rows(f"{extra}, {effect} AS fe_label")
        keep = [int(j) for j in self.view.stream.keep_columns]
        sums = ", ".join(f"sum(w * v{j}) AS s{j}" for j in keep)
        demeaned = ", ".join(f"clean.v{j} - level.s{j} / level.w_level AS v{i}"
                             for i, j in enumerate(keep))
        every = ", ".join(["w", "fe_label", *(f"v{j}" for j in range(len(self.values)))])
        sql = (f"WITH clean AS ({raw}), level AS (SELECT fe_label, count(*) AS n_level, "
               f"sum(w) AS w_level, {sums} FROM clean GROUP BY fe_label) "
               f"SELECT clean.w AS w, {demeaned}, clean.* EXCLUDE ({every}) FROM clean "
               "JOIN level ON clean.fe_label = level.fe_label "
               "WHERE level.n_level > 1")
        return sql, params

    def flagged(self, quick: bool = False) -> str:
        """The kept rows with every raw column and the flag :data:`CLEAN` (``quick``: NULLs
        only, exact when :func:`quick_verdict` finds no NaN)."""
        condition = self.quick_clean if quick else self.clean_condition
        return f"(SELECT *, {condition} AS {CLEAN} FROM {self.kept} AS kept)"

    def total_rows(self) -> int:
        """Rows before the filter (Parquet metadata for files)."""
        return int(self.run(f"SELECT * FROM {self.total}", self.params).fetchone()[0])

    def close(self) -> None:
        self.connection.close()


def _floatable(level: str) -> bool:
    try:
        float(level)
    except ValueError:
        return False
    return True


def _numeric_roles(plan: Plan) -> list[tuple[str, str]]:
    return [(role, c) for role, c in roles(plan.source.spec)
            if c not in plan.text and role not in ("cluster", "absorbed fixed effect")]


def _check_parts(plan: Plan) -> list[str]:
    """The checks' aggregates over the rows of :meth:`Plan.flagged` (rows, clean rows, missing
    values per used column, infinite values and the largest finite size per numeric column,
    non-positive weights)."""
    spec = plan.source.spec
    parts = ["count(*)", f"count(*) FILTER (WHERE {CLEAN})"]
    parts += [f"count(*) FILTER (WHERE {missing(c, plan.numeric[c])})"
              for c in plan.role_columns]
    for _, c in _numeric_roles(plan):
        parts += [f"count(*) FILTER (WHERE isinf({number(c)}))",
                  f"max(abs({number(c)})) FILTER (WHERE isfinite({number(c)}))"]
    if spec.weight is not None:
        parts.append(f"count(*) FILTER (WHERE {number(spec.weight)} <= 0)")
    return parts


def check_verdict(plan: Plan, row: Sequence, total: int) -> tuple[int, int]:
    """Raise the first problem the aggregates of :func:`_check_parts` show (the numpy path's
    messages); return (rows removed by the filter, rows dropped for a missing value)."""
    spec, where = plan.source.spec, plan.source.description
    kept_rows, clean = int(row[0]), int(row[1])
    at = 2 + len(plan.role_columns)
    counts = dict(zip(plan.role_columns, (int(v) for v in row[2:at])))
    for role, c in _numeric_roles(plan):
        infinite, largest = row[at], row[at + 1]
        at += 2
        what = f"{role} {c!r} in {where}"
        if infinite:
            raise InputError(f"{what} has {infinite} infinite value(s); recode them to finite "
                             "numbers or drop those rows")
        if largest is not None and largest > MAX_MAGNITUDE:
            raise InputError(f"{what} holds {largest:g} in size, out of the range this analysis "
                             f"can handle (magnitudes up to {MAX_MAGNITUDE:g}); rescale the "
                             "column (e.g. divide it by a power of ten) and read the estimates "
                             "in the new unit")
        if largest is not None and 0.0 < largest < 1.0 / MAX_MAGNITUDE:
            raise InputError(f"{what} holds only values below {1.0 / MAX_MAGNITUDE:g} in size "
                             f"(largest {largest:g}); rescale the column (e.g. multiply it by "
                             "a power of ten) and read the estimates in the new unit")
    if spec.weight is not None and row[at]:
        raise InputError(f"weight {spec.weight!r} in {where} has {row[at]} zero or negative "
                         "value(s); weights must be positive: drop those rows or fix the "
                         "weights")
    tally = Tally(spec, where)
    tally.add(kept_rows, clean, counts, total - kept_rows)
    tally.finish()
    return total - kept_rows, kept_rows - clean


def checks(plan: Plan) -> tuple[int, int, np.ndarray]:
    """The checks in one scan; returns (rows removed by the filter, rows dropped, each value
    column's plain mean over the clean rows as a centring shift)."""
    parts = _check_parts(plan)
    parts += [f"avg({v}) FILTER (WHERE {CLEAN})" for v in plan.values]
    row = plan.run(f"SELECT {', '.join(parts)} FROM {plan.flagged()} AS kept",
                   plan.value_params + plan.kept_params).fetchone()
    n_filtered, n_dropped = check_verdict(plan, row, plan.total_rows())
    width = len(plan.values)
    shift = np.array([0.0 if v is None else float(v) for v in row[len(row) - width:]])
    return n_filtered, n_dropped, shift


def scan_parts(plan: Plan) -> list[str] | None:
    """The grouped scan's own check aggregates (rows, clean rows, the least weight), few so
    that the scan costs little more than its moment sums; ``None`` when a numeric role's
    column is not stored as a number (the full checks then say what is wrong)."""
    if not all(plan.numeric[c] for _, c in _numeric_roles(plan)):
        return None
    parts = ["count(*)", f"count(*) FILTER (WHERE {CLEAN})"]
    if plan.source.spec.weight is not None:
        parts.append(f"min({number(plan.source.spec.weight)})")
    return parts


def sums_verdict(plan: Plan, total: int, rows: int, least_weight, shift: np.ndarray,
                 per_group: np.ndarray) -> tuple[int, int] | None:
    """:func:`check_verdict` for a scan whose kept rows are all clean, from its moment sums
    ``per_group`` (``(G, 1+p, 1+p)`` of ``[1, v − shift]``) alone.

    A NaN or an infinite value makes a sum non-finite.  Each value column's largest size lies
    between ``max(|shift|, √(Σw v² / Σw))`` and ``|shift| + √(max_g Σ_g w d² / least w)``
    (the shift is a mean of some of its values); a positive weight's between ``Σw / rows``
    and ``Σw``.  ``None`` where a sum is not finite, a weight is not positive or the bounds
    cannot settle the size checks: the full checks then count and name the problem."""
    weighted = plan.source.spec.weight is not None
    if rows == 0 or not np.isfinite(per_group).all():
        return None
    if weighted and not (least_weight is not None and least_weight > 0):
        return None
    least = float(least_weight) if weighted else 1.0
    whole = per_group.sum(axis=0)
    weight_sum = float(whole[0, 0])
    margin = 1.0 + 1e-9
    for role, c in _numeric_roles(plan):
        if role == "weight":
            lower, upper = weight_sum / rows, weight_sum
        else:
            j = 1 + plan.value_index[c]
            s = float(shift[j - 1])
            with np.errstate(over="ignore", invalid="ignore"):
                second = float(whole[j, j] + 2.0 * s * whole[0, j] + s * s * weight_sum)
            lower = max(abs(s), float(np.sqrt(max(second, 0.0) / weight_sum)))
            upper = abs(s) + float(np.sqrt(per_group[:, j, j].max() / least))
        if not upper * margin <= MAX_MAGNITUDE:
            return None
        if upper > 0.0 and not lower >= margin / MAX_MAGNITUDE:
            return None
    full = [rows, rows, *(0 for _ in plan.role_columns)]
    full += [v for _ in _numeric_roles(plan) for v in (0, None)]
    return check_verdict(plan, full + ([0] if weighted else []), total)


def quick_row(plan: Plan) -> list:
    """:func:`quick_parts`' aggregates over the kept rows in one scan without grouping (where
    some kept row has a missing value, the exact missing counts the messages need)."""
    parts = quick_parts(plan)
    return list(plan.run(f"SELECT {', '.join(parts)} FROM {plan.flagged(quick=True)} AS kept",
                         plan.kept_params).fetchone())


def quick_parts(plan: Plan) -> list[str]:
    """Cheaper aggregates for the same checks where no value is NaN or infinite: missing values
    as NULL counts, each numeric column's least and largest value (NaN and ±inf show there),
    the least weight (:func:`quick_row` reads them where :func:`scan_parts` found a row with
    a missing value; numeric roles are stored as numbers there)."""
    parts = ["count(*)", f"count(*) FILTER (WHERE {CLEAN})"]
    parts += [f"count(*) - count({quoted(c)})" if plan.numeric[c]
              else f"count(*) FILTER (WHERE {missing(c, False)})" for c in plan.role_columns]
    for _, c in _numeric_roles(plan):
        parts += [f"min({number(c)})", f"max({number(c)})"]
    if plan.source.spec.weight is not None:
        parts.append(f"min({number(plan.source.spec.weight)})")
    return parts


def quick_verdict(plan: Plan, row: Sequence, total: int) -> tuple[int, int] | None:
    """:func:`check_verdict` from :func:`quick_parts`' aggregates; ``None`` where a NaN, an
    infinite value or a non-positive weight shows, for the full checks to count and name."""
    at = 2 + len(plan.role_columns)
    full = list(row[:at])
    for _ in _numeric_roles(plan):
        low, high = row[at], row[at + 1]
        at += 2
        if low is None:
            full += [0, None]
            continue
        if np.isnan(low) or np.isnan(high) or np.isinf(low) or np.isinf(high):
            return None
        full += [0, max(abs(low), abs(high))]
    if plan.source.spec.weight is not None:
        if row[at] is not None and not row[at] > 0:
            return None
        full.append(0)
    return check_verdict(plan, full, total)
