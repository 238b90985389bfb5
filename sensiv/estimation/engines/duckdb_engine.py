"""The DuckDB engine: both passes as SQL aggregates inside DuckDB, over Parquet / CSV files (one,
a directory, a glob, hive partitions) or a table of a DuckDB database.  DuckDB runs them
multi-threaded and out of core; only the reduced sums come back to Python.

* Pass 1: a first query counts rows, missing values, infinite and out-of-range values and
  weights (the numpy path's checks, with its messages) and gives each column's plain mean as a
  shift; a second query sums ``w·(v − shift)`` and ``w·(vᵢ − shiftᵢ)(vⱼ − shiftⱼ)``, from which
  the weighted means and centred co-moments follow — centred sums, not raw ones, so that
  columns with a large mean keep their accuracy.
* Pass 2: the score vectors are linear maps of the centred row (``ScoreBlock``: ``a = d̃ @
  left``, ``e = d̃ @ right``), emitted as SQL; robust sums are ``SUM(gₘ·gₙ)``, cluster sums
  ``SUM(gₘ) … GROUP BY cluster`` with ``Σ_g s_g s_g'`` formed in numpy; two-way clusters are
  the grouping sets ``(A)``, ``(B)``, ``(A, B)`` of one scan, combined as the numpy kernel does.
* One absorbed fixed effect: a pass 0 ``GROUP BY`` the fixed effect (rows, weights, means,
  extremes, distinct clusters per level); passes 1 and 2 then read the rows joined with their
  level sums, each column minus its level mean, singletons left out.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from sensiv.core.errors import InputError
from sensiv.core.limits import MAX_MAGNITUDE
from sensiv.data.convert import Tally
from sensiv.data.datasets import missing_extra, quoted
from sensiv.data.spec import cluster_columns, read_columns, roles
from sensiv.estimation.engines.duckdb_sql import (PANDAS_MISSING, Query, filter_sql, indicator,
                                                  is_numeric, linear, missing, number)
from sensiv.estimation.absorb_view import GroupAbsorbed, GroupStats
from sensiv.estimation.cluster_ways import combine_ways
from sensiv.estimation.moments import Moments, ScoreBlock, ScoreSums


def _duckdb() -> Any:
    try:
        import duckdb
    except ImportError as exc:
        raise missing_extra("duckdb") from exc
    return duckdb


def _relation(source) -> tuple[Any, str, list]:
    """A connection, the FROM clause and its parameters for the source's raw rows."""
    duckdb = _duckdb()
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


class _Plan:
    """The SQL pieces of one source: column kinds, the filtered rows, the data expressions."""

    def __init__(self, source) -> None:
        self.view = source if isinstance(source, GroupAbsorbed) else None
        source = source.base if self.view is not None else source
        self.source = source
        self.connection, relation, params = _relation(source)
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
        values = Query()
        self.values = []
        for name in (spec.outcome, *spec.treatments, *spec.instruments, *spec.controls):
            if name not in levels:
                self.values.append(number(name))
                continue
            numeric_levels = name in spec.categorical
            for level in levels[name][1:]:
                self.values.append(indicator(name, level, numeric_levels and _floatable(level),
                                             values))
        self.value_params = values.params
        self.weight = number(spec.weight) if spec.weight is not None else None

    def run(self, sql: str, params: list) -> Any:
        duckdb = _duckdb()
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

    def close(self) -> None:
        self.connection.close()


def _floatable(level: str) -> bool:
    try:
        float(level)
    except ValueError:
        return False
    return True


def _checks(plan: _Plan) -> tuple[int, int, dict[str, int]]:
    """The numpy path's value checks in SQL; returns (rows kept by the filter, clean rows,
    missing counts per column) after raising the first problem found."""
    spec, where = plan.source.spec, plan.source.description
    numeric_roles = [(role, c) for role, c in roles(spec)
                     if c not in plan.text and role not in ("cluster", "absorbed fixed effect")]
    parts = ["count(*)", f"count(*) FILTER (WHERE {plan.clean_condition})"]
    parts += [f"count(*) FILTER (WHERE {missing(c, plan.numeric[c])})"
              for c in plan.role_columns]
    for _, c in numeric_roles:
        parts += [f"count(*) FILTER (WHERE isinf({number(c)}))",
                  f"max(abs({number(c)})) FILTER (WHERE isfinite({number(c)}))"]
    if spec.weight is not None:
        parts.append(f"count(*) FILTER (WHERE {number(spec.weight)} <= 0)")
    parts += [f"avg({v}) FILTER (WHERE {plan.clean_condition})" for v in plan.values]
    row = plan.run(f"SELECT {', '.join(parts)} FROM {plan.kept} AS kept",
                   plan.value_params + plan.kept_params).fetchone()
    total = plan.run(f"SELECT * FROM {plan.total}", plan.params).fetchone()[0]
    kept_rows, clean = int(row[0]), int(row[1])
    at = 2 + len(plan.role_columns)
    counts = dict(zip(plan.role_columns, (int(v) for v in row[2:at])))
    for role, c in numeric_roles:
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
    if spec.weight is not None:
        if row[at]:
            raise InputError(f"weight {spec.weight!r} in {where} has {row[at]} zero or negative "
                             "value(s); weights must be positive: drop those rows or fix the "
                             "weights")
        at += 1
    tally = Tally(spec, where)
    tally.add(kept_rows, clean, counts, total - kept_rows)
    tally.finish()
    shift = np.array([0.0 if v is None else float(v) for v in row[at:]])
    return total - kept_rows, kept_rows - clean, shift


def moments(source, columns: Sequence[str]) -> Moments:
    """Pass 1 in DuckDB; the same :class:`Moments` as the numpy stream."""
    plan = _Plan(source)
    try:
        n_filtered, n_dropped, shift = _checks(plan)
        rows, params = plan.clean_rows()
        p = plan.width
        if plan.view is not None:
            shift = np.zeros(p)          # the demeaned columns have mean zero
        query = Query()
        centred = ", ".join(f"v{j} - {query.bind(float(shift[j]))} AS d{j}" for j in range(p))
        sums = ["count(*)", "sum(w)"] + [f"sum(w * d{j})" for j in range(p)]
        sums += [f"sum(w * d{i} * d{j})" for i in range(p) for j in range(i, p)]
        sql = (f"SELECT {', '.join(sums)} FROM (SELECT w, {centred} FROM ({rows}) AS clean) "
               "AS centred")
        row = plan.run(sql, query.params + params).fetchone()
    finally:
        plan.close()
    n, total = int(row[0]), float(row[1])
    first = np.array(row[2:2 + p], dtype=np.float64)
    product = np.zeros((p, p))
    product[np.triu_indices(p)] = np.array(row[2 + p:], dtype=np.float64)
    product = product + np.triu(product, 1).T
    offset = first / total
    comoment = product - np.outer(first, first) / total
    return Moments(tuple(columns), n, n_dropped, total, shift + offset,
                   0.5 * (comoment + comoment.T), n_filtered)


def _score_columns(blocks: Sequence[ScoreBlock], mean: np.ndarray, query: Query
                   ) -> tuple[list[str], list[str], list[tuple[str, int]]]:
    """SQL of the mapped columns ``a``, ``e`` (over centred columns ``d{j}``, each bound once)
    and of every score column ``g{b}_{m} = w·aₖ·eₗ``, with the block of each score column."""
    p = len(mean)
    names = [f"d{j}" for j in range(p)]
    maps, scores, index = [], [], []
    for b, block in enumerate(blocks):
        for side, matrix in (("a", block.left), ("e", block.right)):
            maps += [f"{linear(matrix[1:, k], names, matrix[0, k], query)} AS {side}{b}_{k}"
                     for k in range(matrix.shape[1])]
        m = 0
        for k in range(block.left.shape[1]):
            for el in range(block.right.shape[1]):
                scores.append(f"w * a{b}_{k} * e{b}_{el} AS g{b}_{m}")
                index.append((block.name, m))
                m += 1
    return maps, scores, index


def _grouped_sums(plan: _Plan, scores: str, names: list[str], params: list, ways: int
                  ) -> list[np.ndarray]:
    """Per-cluster sums of the score columns: ``GROUP BY c0`` for one way; for two ways the
    grouping sets ``(c0)``, ``(c1)`` and ``(c0, c1)`` in one scan."""
    sums = ", ".join(f"sum({g})" for g in names)
    if ways == 1:
        rows = plan.run(f"SELECT {sums} FROM ({scores}) AS scores GROUP BY c0", params)
        return [np.asarray(rows.fetchall(), dtype=np.float64).reshape(-1, len(names))]
    sql = (f"SELECT grouping(c0, c1) AS way, {sums} FROM ({scores}) AS scores "
           "GROUP BY GROUPING SETS ((c0), (c1), (c0, c1))")
    table = np.asarray(plan.run(sql, params).fetchall(), dtype=np.float64)
    table = table.reshape(-1, 1 + len(names))
    # grouping(c0, c1): 1 when only c0 groups (way A), 2 when only c1 (B), 0 for both (A∩B)
    return [table[table[:, 0] == code, 1:] for code in (1, 2, 0)]


def score_sums(source, mean: np.ndarray, blocks: Sequence[ScoreBlock], cluster: bool
               ) -> ScoreSums:
    """Pass 2 in DuckDB; the same :class:`ScoreSums` as the numpy stream (robust, one- or
    two-way cluster sums)."""
    plan = _Plan(source)
    clusters = cluster_columns(source.spec) if cluster else ()
    try:
        rows, params = plan.clean_rows("".join(f", {quoted(c)} AS c{k}"
                                               for k, c in enumerate(clusters)))
        query, inner = Query(), Query()
        centred = ", ".join(f"v{j} - {inner.bind(float(mean[j]))} AS d{j}"
                            for j in range(len(mean)))
        maps, exprs, index = _score_columns(blocks, mean, query)
        params = inner.params + params
        keep = "".join(f", c{k}" for k in range(len(clusters)))
        scores = (f"SELECT {', '.join(exprs)}{keep} FROM (SELECT w, {', '.join(maps)}{keep} "
                  f"FROM (SELECT w, {centred}{keep} FROM ({rows}) AS clean) AS centred) "
                  "AS mapped")
        names = [e.rsplit(" AS ", 1)[1] for e in exprs]
        if cluster:
            per_way = _grouped_sums(plan, scores, names, query.params + params, len(clusters))
        else:
            pairs = [(i, j) for i in range(len(names)) for j in range(i, len(names))
                     if index[i][0] == index[j][0]]
            sql = (f"SELECT {', '.join(f'sum({names[i]} * {names[j]})' for i, j in pairs)} "
                   f"FROM ({scores}) AS scores")
            row = plan.run(sql, query.params + params).fetchone()
    finally:
        plan.close()
    if cluster:
        split, start = [], 0
        for block in blocks:
            split.append((block.name, start, start + block.size))
            start += block.size
        return combine_ways([{name: sums[:, a:b] for name, a, b in split} for sums in per_way])
    meats = {block.name: np.zeros((block.size, block.size)) for block in blocks}
    offsets = {block.name: sum(b.size for b in blocks[:k]) for k, block in enumerate(blocks)}
    for (i, j), value in zip(pairs, row):
        name = index[i][0]
        a, c = i - offsets[name], j - offsets[name]
        meats[name][a, c] = meats[name][c, a] = float(value or 0.0)
    return ScoreSums(meats, None)


def group_stats(source) -> GroupStats:
    """Pass 0 of one absorbed fixed effect: per-level sums of the clean rows, a GROUP BY."""
    import pandas as pd

    plan = _Plan(source)
    spec = source.spec
    try:
        _checks(plan)
        clusters = cluster_columns(spec)
        extra = f", {quoted(spec.absorb[0])} AS fe_label" + "".join(
            f", {quoted(c)} AS c{k}" for k, c in enumerate(clusters))
        rows, params = plan.raw_rows(extra)
        p = len(plan.values)
        parts = ["fe_label", "count(*)", "sum(w)"]
        parts += [f"sum(w * v{j}) / sum(w)" for j in range(p)]
        parts += [f"min(v{j})" for j in range(p)] + [f"max(v{j})" for j in range(p)]
        parts += [f"count(DISTINCT c{k}) = 1" for k in range(len(clusters))]
        result = plan.run(f"SELECT {', '.join(parts)} FROM ({rows}) AS clean GROUP BY fe_label",
                          params).fetchall()
    finally:
        plan.close()
    labels = pd.Index([row[0] for row in result])
    table = np.array([row[1:3 + 3 * p] for row in result], dtype=np.float64).reshape(-1, 2 + 3 * p)
    single = (np.array([row[3 + 3 * p:] for row in result], dtype=bool).reshape(-1, len(clusters))
              if clusters else None)
    return GroupStats(labels, table[:, 0].astype(np.int64), table[:, 1],
                      table[:, 2:2 + p], table[:, 2 + p:2 + 2 * p], table[:, 2 + 2 * p:], single)
