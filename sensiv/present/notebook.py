"""What a notebook shows of a result: an HTML fragment of its results table (with its
assumptions and caution) and its curve or table as a pandas DataFrame.

Nothing is computed here: the numbers are the table rows' and the curve's.  Unbounded ends stay
``±inf`` in a DataFrame (``NaN`` means not available, e.g. an empty set).
"""

from __future__ import annotations

import html
import io
import math
from dataclasses import fields, is_dataclass

import numpy as np

from sensiv.core.results import Interval
from sensiv.present.tables import Table, table_cells, table_csv

# Inline styles only: a notebook's own style sheet decides the rest.
_CELL = 'style="text-align:left; vertical-align:top"'


def table_html(table: Table) -> str:
    """The table as an HTML fragment: title, table, each analysis's assumptions, caution."""
    e = html.escape
    header, body = table_cells(table)
    head = "".join(f"<th {_CELL}>{e(h)}</th>" for h in header)
    rows = "".join("<tr>" + "".join(f"<td {_CELL}>{e(c)}</td>" for c in row) + "</tr>"
                   for row in body)
    parts = [f'<div class="sensiv-result"><strong>{e(table.title)}</strong>',
             f"<table><thead><tr>{head}</tr></thead><tbody>{rows}</tbody></table>"]
    for heading, lines in table.notes:
        items = "".join(f"<li>{e(line)}</li>" for line in lines)
        parts.append(f"<details><summary>Assumptions — {e(heading)}</summary><ul>{items}</ul>"
                     "</details>")
    parts += [f"<p><em>{e(caution)}</em></p>" for caution in table.cautions]
    return "".join(parts) + "</div>"


def text_html(text: str) -> str:
    """A plain-text summary as a preformatted HTML block (results without a table)."""
    return f'<div class="sensiv-result"><pre>{html.escape(text)}</pre></div>'


def table_frame(table: Table):
    """The table's rows as a DataFrame with the CSV columns (``inf`` for unbounded ends)."""
    import pandas as pd

    return pd.read_csv(io.StringIO(table_csv(table)), keep_default_na=False,
                       na_values=[""])


def curve_frame(curve):
    """A curve as a DataFrame: a dataclass of equal-length arrays (one column each), or a
    sequence of points (numbers as columns; an interval or a union of intervals as its hull
    ``lower`` / ``upper``, ``NaN`` when empty)."""
    import pandas as pd

    if is_dataclass(curve):
        columns = {f.name: np.asarray(getattr(curve, f.name), dtype=float)
                   for f in fields(curve) if getattr(curve, f.name) is not None}
        return pd.DataFrame(columns)
    return pd.DataFrame([_point_row(point) for point in curve])


def _point_row(point) -> dict:
    row: dict = {}
    for f in fields(point):
        value = getattr(point, f.name)
        if isinstance(value, bool) or value is None:
            continue
        if isinstance(value, (int, float)):
            row[f.name] = float(value)
        elif isinstance(value, Interval):
            row.update(lower=value.low, upper=value.high)
        elif isinstance(value, tuple) and all(isinstance(v, Interval) for v in value):
            row.update(lower=value[0].low if value else math.nan,
                       upper=value[-1].high if value else math.nan)
    for key in ("lower", "upper"):
        row.setdefault(key, math.nan)
    return row
