"""SQL text for the DuckDB engine, built only from sensiv's own structures: quoted column
names, the parsed row filter (:mod:`sensiv.data.where` tree) and bound parameters.  No user
text is ever pasted into a query.

Every expression here keeps the numpy path's rules: listwise deletion of a missing value in any
used column (NULL, NaN, and in text columns the empty string), text controls as 0/1 indicators
of the kept levels, a comparison with a missing value false (also ``!=``).
"""

from __future__ import annotations

from dataclasses import dataclass, field

from sensiv.data.datasets import quoted
from sensiv.data.where import Both, Compare, Either, Member, Missing, Not

NUMERIC_TYPES = ("TINYINT", "SMALLINT", "INTEGER", "BIGINT", "HUGEINT", "UTINYINT", "USMALLINT",
                 "UINTEGER", "UBIGINT", "FLOAT", "DOUBLE", "BOOLEAN", "DECIMAL", "REAL")
"""DuckDB column types read as numbers (``DECIMAL(p, s)`` by its prefix)."""

PANDAS_MISSING = ["", "#N/A", "#N/A N/A", "#NA", "-1.#IND", "-1.#QNAN", "-NaN", "-nan", "1.#IND",
                  "1.#QNAN", "<NA>", "N/A", "NA", "NULL", "NaN", "None", "n/a", "nan", "null"]
"""The strings pandas reads as missing in a CSV file (pandas ``read_csv`` documentation,
``na_values``), so that both engines drop the same rows."""


def is_numeric(sql_type: str) -> bool:
    return sql_type.upper().startswith(NUMERIC_TYPES)


@dataclass
class Query:
    """SQL text with its positional parameters, grown by :meth:`bind`."""

    params: list = field(default_factory=list)

    def bind(self, value) -> str:
        self.params.append(value)
        return "?"


def number(name: str) -> str:
    """A column as DOUBLE (NULL where it does not read as a number)."""
    return f"TRY_CAST({quoted(name)} AS DOUBLE)"


def text(name: str) -> str:
    return f"CAST({quoted(name)} AS VARCHAR)"


def not_a_number(value: str) -> str:
    """True where ``value`` is NaN.  Written as "not finite and not infinite", not as
    ``isnan``: DuckDB 2.0 folds ``isnan`` to false from Parquet statistics, which pyarrow
    writes without the NaNs (seen on a file with NaN stored as NaN; common practice is NULL)."""
    return f"(NOT isfinite({value}) AND NOT isinf({value}))"


def missing(name: str, numeric: bool) -> str:
    """True where the column is missing as the numpy path counts it."""
    if numeric:
        return f"({quoted(name)} IS NULL OR {not_a_number(number(name))})"
    return f"({quoted(name)} IS NULL OR {text(name)} = '')"


def indicator(name: str, level: str, numeric_level: bool, query: Query) -> str:
    """1.0 where a text control takes ``level``, else 0.0."""
    if numeric_level:
        test = f"{number(name)} = {query.bind(float(level))}"
    else:
        test = f"{text(name)} = {query.bind(level)}"
    return f"(CASE WHEN {test} THEN 1.0 ELSE 0.0 END)"


def _leaf(leaf, kinds: dict[str, str], query: Query) -> str:
    numeric = kinds[leaf.column] == "numeric"
    value = number(leaf.column) if numeric else text(leaf.column)
    absent = (f"({value} IS NULL OR {not_a_number(value)})" if numeric
              else f"({value} IS NULL OR {value} = '')")
    if isinstance(leaf, Missing):
        return f"(NOT {absent})" if leaf.negated else absent

    def literal(v):
        return query.bind(float(v) if numeric else v)
    if isinstance(leaf, Member):
        listed = ", ".join(literal(v) for v in leaf.values)
        word = "NOT IN" if leaf.negated else "IN"
        return f"(NOT {absent} AND {value} {word} ({listed}))"
    op = "=" if leaf.op == "==" else "<>" if leaf.op == "!=" else leaf.op
    return f"(NOT {absent} AND {value} {op} {literal(leaf.value)})"


def filter_sql(node, kinds: dict[str, str], query: Query) -> str:
    """The row filter tree as a WHERE condition that is never NULL."""
    if isinstance(node, Not):
        return f"(NOT {filter_sql(node.operand, kinds, query)})"
    if isinstance(node, (Both, Either)):
        word = "AND" if isinstance(node, Both) else "OR"
        return (f"({filter_sql(node.left, kinds, query)} {word} "
                f"{filter_sql(node.right, kinds, query)})")
    assert isinstance(node, (Compare, Member, Missing))
    return f"COALESCE({_leaf(node, kinds, query)}, FALSE)"


def linear(coefficients, columns: list[str], offset: float, query: Query) -> str:
    """``offset + Σ cⱼ·columnⱼ`` with zero terms left out."""
    terms = [query.bind(float(offset))]
    terms += [f"{query.bind(float(c))} * {name}" for c, name in zip(coefficients, columns)
              if c != 0.0]
    return "(" + " + ".join(terms) + ")"
