"""The DuckDB engine: both passes as SQL aggregates inside DuckDB, over Parquet / CSV files (one,
a directory, a glob, hive partitions) or a table of a DuckDB database.  DuckDB runs them
multi-threaded and out of core; only the reduced sums come back to Python.

* Pass 1, one scan: sums of ``w·(v − shift)`` and ``w·(vᵢ − shiftᵢ)(vⱼ − shiftⱼ)`` about a
  shift from the first rows (the weighted means and centred co-moments follow exactly, and
  columns with a large mean keep their accuracy) beside three check aggregates (rows, clean
  rows, the least weight).  Where every row is clean, the numpy path's checks follow from the
  sums themselves (a NaN or infinite value makes a sum non-finite; the sums bound each column's
  largest size); where a row has a missing value, one scan without grouping counts them.  Where
  that cannot decide (a NaN, an infinite value, a non-positive weight), a full-checks query
  counts and names it (the numpy path's messages) before a second moment query.
* With one-way clusters that scan is grouped by the cluster and keeps each cluster's moment
  matrix ``M_g = Σ w d̃ d̃'``; the scores are bilinear in the row (``ScoreBlock``: ``a = d̃ @
  left``, ``e = d̃ @ right``), so pass 2's cluster sums are ``vec(left' M_g right)``, with no
  second read of the data.
* Otherwise pass 2 emits the score vectors as SQL; robust sums are ``SUM(gₘ·gₙ)``; two-way
  clusters are per-cluster moment matrices (or score sums, whichever costs fewer products a
  row) of the grouping sets ``(A)``, ``(B)``, ``(A, B)`` of one scan, combined as the numpy
  kernel does.
* One absorbed fixed effect: a pass 0 ``GROUP BY`` the fixed effect (rows, weights, means,
  extremes, distinct clusters per level); passes 1 and 2 then read the rows joined with their
  level sums, each column minus its level mean, singletons left out.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from sensiv.core.errors import InputError
from sensiv.data.datasets import quoted
from sensiv.data.spec import cluster_columns
from sensiv.estimation.absorb_view import GroupStats
from sensiv.estimation.cluster_moments import (ClusterMoments, cluster_scores, recall, remember,
                                               scores_from, symmetric)
from sensiv.estimation.cells import Cells, beyond_limits
from sensiv.estimation.cluster_ways import combine_ways
from sensiv.data.subsets import IndicatorCounts
from sensiv.estimation.engines.duckdb_plan import (CLEAN, Plan, checks, duckdb_module,
                                                   open_relation, quick_row, quick_verdict,
                                                   scan_parts, sums_verdict)
from sensiv.estimation.engines.duckdb_sql import (Query, filter_sql, is_numeric, linear,
                                                  missing, number)
from sensiv.estimation.moments import Moments, ScoreBlock, ScoreSums

SAMPLE_ROWS = 65_536
"""Rows of the first rows read for a centring shift when pass 1 is one grouped scan."""

def _sample_shift(plan: Plan) -> np.ndarray | None:
    """Each value column's mean over the first :data:`SAMPLE_ROWS` kept rows (finite values
    only), a centring shift; ``None`` when a column has no finite value there."""
    values = ", ".join(f"{v} AS s{j}" for j, v in enumerate(plan.values))
    means = ", ".join(f"avg(CASE WHEN isfinite(s{j}) THEN s{j} END)"
                      for j in range(len(plan.values)))
    row = plan.run(f"SELECT {means} FROM (SELECT {values} FROM {plan.kept} AS kept "
                   f"LIMIT {SAMPLE_ROWS}) AS sample", plan.value_params + plan.kept_params
                   ).fetchone()
    return None if any(v is None for v in row) else np.array(row, dtype=np.float64)


def _grouped_sums_sql(plan: Plan, parts: list[str], shift: np.ndarray, cluster: str | None
                     ) -> tuple[str, list]:
    """One scan (GROUP BY the cluster, if any): the checks' aggregates ``parts`` (``k…``) and
    the augmented moment matrix of the clean rows about ``shift`` (``m…``, upper triangle)."""
    p = len(plan.values)
    query = Query()
    values = ", ".join(f"{v} AS sensiv_v{j}_" for j, v in enumerate(plan.values))
    label = f", {quoted(cluster)} AS sensiv_c_" if cluster is not None else ""
    inner = (f"SELECT *, {plan.weight or '1.0'} AS sensiv_w_, {values}{label} "
             f"FROM {plan.flagged(quick=True)} AS flagged")
    centred = ", ".join(f"CASE WHEN {CLEAN} THEN sensiv_v{j}_ - {query.bind(float(shift[j]))} "
                        f"ELSE 0.0 END AS sensiv_d{j}_" for j in range(p))
    mid = (f"SELECT *, CASE WHEN {CLEAN} THEN sensiv_w_ ELSE 0.0 END AS sensiv_cw_, {centred} "
           f"FROM ({inner}) AS valued")
    sums = _moment_sums([f"sensiv_d{j}_" for j in range(p)], "sensiv_cw_",
                        plan.weight is not None)
    listed = ", ".join([*(f"{part} AS k{i}" for i, part in enumerate(parts)), *sums])
    grouping = " GROUP BY sensiv_c_" if cluster is not None else ""
    sql = f"SELECT {listed} FROM ({mid}) AS centred{grouping}"
    return sql, query.params + plan.value_params + plan.kept_params


def _moment_sums(columns: list[str], weight: str, weighted: bool) -> list[str]:
    """``sum(w·aᵢ·aⱼ) AS m{k}`` over the upper triangle of the augmented row ``[1, columns]``
    (row-major); the weight is left out of the non-constant terms when it is 1 (``weighted``
    false) or already 0 on the rows it must drop."""
    names = ["", *columns]
    sums = []
    for i in range(len(names)):
        for j in range(i, len(names)):
            factors = [f for f in (names[i], names[j]) if f]
            if weighted or not factors:
                factors = [weight, *factors]
            sums.append(f"sum({' * '.join(factors)}) AS m{len(sums)}")
    return sums


def _matrices(table: dict, size: int, keep=slice(None)) -> np.ndarray:
    """The ``(G, size, size)`` moment matrices of a result's ``m{k}`` columns."""
    entries = size * (size + 1) // 2
    return symmetric(np.column_stack([np.asarray(table[f"m{k}"], dtype=np.float64)[keep]
                                      for k in range(entries)]), size)


def _least(column) -> float | None:
    """The least value of a check aggregate over the groups (``None`` when no group has one;
    a NaN stays NaN)."""
    met = np.ma.asarray(column, dtype=np.float64).compressed()
    if met.size == 0:
        return None
    return float("nan") if np.isnan(met).any() else float(met.min())


def _one_scan_pass(plan: Plan, source, columns: Sequence[str]) -> Moments | None:
    """Pass 1 as one scan: moments and a few check aggregates, grouped by the cluster for
    one-way clusters, whose per-cluster moment matrices are kept for pass 2
    (:func:`~sensiv.estimation.cluster_moments.remember`).  Where every kept row is clean the
    checks follow from the sums (:func:`~.duckdb_plan.sums_verdict`); where some row has a
    missing value, from one cheap scan without grouping (:func:`~.duckdb_plan.quick_row`).
    ``None`` where those cannot decide (a NaN, an infinite value, a text column in a numeric
    role...): the two-query route then runs the full checks."""
    parts = scan_parts(plan)
    shift = _sample_shift(plan) if parts is not None else None
    if shift is None:
        return None
    clusters = cluster_columns(source.spec)
    cluster = clusters[0] if len(clusters) == 1 else None
    sql, params = _grouped_sums_sql(plan, parts, shift, cluster)
    table = plan.run(sql, params).fetchnumpy()
    rows, clean = (int(np.sum(np.asarray(table[k], dtype=np.int64))) for k in ("k0", "k1"))
    p = len(plan.values)
    met = np.asarray(table["k1"]) > 0             # clusters with a clean row
    per_cluster = _matrices(table, p + 1, met)
    if rows == clean:
        least = _least(table["k2"]) if source.spec.weight is not None else None
        verdict = sums_verdict(plan, plan.total_rows(), rows, least, shift, per_cluster)
    else:
        verdict = quick_verdict(plan, quick_row(plan), plan.total_rows())
    if verdict is None:
        return None
    n_filtered, n_dropped = verdict
    remember(source, ClusterMoments([], shift, per_cluster) if cluster is not None else None)
    whole = per_cluster.sum(axis=0)
    return _centred_moments(columns, clean, n_dropped, n_filtered, shift, whole[0, 0],
                            whole[0, 1:], whole[1:, 1:])


def _centred_moments(columns, n, n_dropped, n_filtered, shift, total, first, product
                     ) -> Moments:
    """:class:`Moments` from sums about ``shift``: ``Σw``, ``Σw·d`` and ``Σw·d·d'``."""
    total = float(total)
    offset = first / total
    comoment = product - np.outer(first, first) / total
    return Moments(tuple(columns), int(n), n_dropped, total, shift + offset,
                   0.5 * (comoment + comoment.T), n_filtered)


def moments(source, columns: Sequence[str]) -> Moments:
    """Pass 1 in DuckDB; the same :class:`Moments` as the numpy stream."""
    plan = Plan(source)
    try:
        if plan.view is None:
            quick = _one_scan_pass(plan, source, columns)
            if quick is not None:
                return quick
        n_filtered, n_dropped, shift = checks(plan)
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
    first = np.array(row[2:2 + p], dtype=np.float64)
    product = np.zeros((p, p))
    product[np.triu_indices(p)] = np.array(row[2 + p:], dtype=np.float64)
    product = product + np.triu(product, 1).T
    return _centred_moments(columns, row[0], n_dropped, n_filtered, shift, row[1], first,
                            product)


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


def _grouped_sums(plan: Plan, scores: str, names: list[str], params: list, ways: int
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


def _grouped_moments(plan: Plan, centred: str, p: int, params: list, ways: int
                     ) -> list[np.ndarray]:
    """Per-cluster augmented moment matrices ``M_g = Σ_{i∈g} w d̃ᵢ d̃ᵢ'`` (``d̃ = [1, d]``), one
    ``(G, 1+p, 1+p)`` array per way (``A``; or ``A``, ``B``, ``A∩B`` from grouping sets)."""
    sums = ", ".join(_moment_sums([f"d{j}" for j in range(p)], "w", plan.weight is not None))
    if ways == 1:
        sql = f"SELECT {sums} FROM ({centred}) AS centred GROUP BY c0"
    else:
        sql = (f"SELECT grouping(c0, c1) AS way, {sums} FROM ({centred}) AS centred "
               "GROUP BY GROUPING SETS ((c0), (c1), (c0, c1))")
    table = plan.run(sql, params).fetchnumpy()
    full = _matrices(table, p + 1)
    if ways == 1:
        return [full]
    # grouping(c0, c1): 1 when only c0 groups (way A), 2 when only c1 (B), 0 for both (A∩B)
    way = np.asarray(table["way"])
    return [full[way == code] for code in (1, 2, 0)]


def _moment_route(blocks: Sequence[ScoreBlock], p: int) -> bool:
    """Whether per-cluster moment matrices (``(p+1)(p+2)/2`` products a row) cost less than the
    score columns themselves (every map's terms and every score's product a row)."""
    maps = sum((b.left.shape[1] + b.right.shape[1]) * (p + 1) + 2 * b.size for b in blocks)
    return (p + 1) * (p + 2) // 2 <= maps


def score_sums(source, mean: np.ndarray, blocks: Sequence[ScoreBlock], cluster: bool
               ) -> ScoreSums:
    """Pass 2 in DuckDB; the same :class:`ScoreSums` as the numpy stream (robust, one- or
    two-way cluster sums)."""
    gathered = recall(source, len(mean)) if cluster else None
    if gathered is not None:
        return combine_ways([scores_from(gathered, mean, blocks)])
    plan = Plan(source)
    clusters = cluster_columns(source.spec) if cluster else ()
    try:
        rows, params = plan.clean_rows("".join(f", {quoted(c)} AS c{k}"
                                               for k, c in enumerate(clusters)))
        query, inner = Query(), Query()
        centred = ", ".join(f"v{j} - {inner.bind(float(mean[j]))} AS d{j}"
                            for j in range(len(mean)))
        keep = "".join(f", c{k}" for k in range(len(clusters)))
        if cluster and _moment_route(blocks, len(mean)):
            centred_rows = f"SELECT w, {centred}{keep} FROM ({rows}) AS clean"
            per_way = _grouped_moments(plan, centred_rows, len(mean), inner.params + params,
                                       len(clusters))
            return combine_ways([cluster_scores(m, blocks) for m in per_way])
        maps, exprs, index = _score_columns(blocks, mean, query)
        params = inner.params + params
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

    plan = Plan(source)
    spec = source.spec
    try:
        checks(plan)
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


def cells(source, limits: Sequence[int]) -> Cells:
    """The discrete tabulation in DuckDB: the numpy path's checks, each of ``y``, ``x``, ``z``'s
    distinct values (at most one past its limit), and where no column is over its limit the
    rows per cell ``(z, x, y)`` as a ``GROUP BY``."""
    plan = Plan(source)
    try:
        n_filtered, n_dropped, _ = checks(plan)
        rows, params = plan.clean_rows()
        seen = tuple(tuple(sorted(float(v) for (v,) in plan.run(
            f"SELECT DISTINCT v{j} FROM ({rows}) AS clean LIMIT {int(limit) + 1}",
            params).fetchall())) for j, limit in enumerate(limits))
        counts = {}
        if not beyond_limits(seen, limits):
            table = plan.run(f"SELECT v2, v1, v0, count(*) FROM ({rows}) AS clean "
                             "GROUP BY v2, v1, v0", params).fetchall()
            counts = {(float(z), float(x), float(y)): int(n) for z, x, y, n in table}
    finally:
        plan.close()
    return Cells(counts, seen, tuple(int(v) for v in limits), n_dropped, n_filtered)


def indicator_counts(source, column: str) -> IndicatorCounts:
    """The counts of a 0/1 marker column over the rows the row filter keeps, in one query (the
    pandas kernel's :func:`~sensiv.data.subsets.count_indicator` rules: NULL and NaN
    missing, text refused)."""
    duckdb = duckdb_module()
    connection, relation, params = open_relation(source)
    name = quoted(column)
    if source.row_filter is not None:   # the rows --where keeps
        query = Query(list(params))
        where = filter_sql(*source.row_filter, query)
        relation, params = f"(SELECT * FROM {relation} WHERE {where})", query.params
    try:
        (kind,), = connection.execute(f"SELECT column_type FROM (DESCRIBE SELECT {name} FROM "
                                      f"{relation})", params).fetchall()
        if not is_numeric(kind):
            rows, present, least = connection.execute(
                f"SELECT count(*), count({name}), min(CAST({name} AS VARCHAR)) FROM {relation}",
                params).fetchone()
            return IndicatorCounts(rows, rows - present, 0, present, None, True, least)
        value, absent = number(column), missing(column, True)
        other = f"NOT {absent} AND {value} <> 0 AND {value} <> 1"
        rows, gone, ones, others, least = connection.execute(
            f"SELECT count(*), count(*) FILTER (WHERE {absent}), count(*) FILTER (WHERE NOT "
            f"{absent} AND {value} = 1), count(*) FILTER (WHERE {other}), min({value}) FILTER "
            f"(WHERE {other}) FROM {relation}", params).fetchone()
    except duckdb.Error as exc:
        raise InputError(f"DuckDB could not read {source.description}: {exc}; check that every "
                         "file is complete and valid, or choose --engine numpy") from exc
    finally:
        connection.close()
    return IndicatorCounts(rows, gone, ones, others, None if least is None else float(least))
