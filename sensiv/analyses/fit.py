"""Registry entry of ``fit``: 2SLS with its diagnostics."""

from __future__ import annotations

from sensiv.analyses.kind import AnalysisKind
from sensiv.estimation import iv
from sensiv.present import figures, table_rows, text


def run(context, options) -> iv.IVFit:
    c = context.common
    return iv.fit(context.source, se=c["se"], confidence_level=c["confidence_level"],
                  small=c["small"])


def draw(result, note):
    """The 2SLS and Anderson–Rubin intervals of the first treatment as a summary figure."""
    return {"summary": figures.summary_intervals(
        figures.fit_items(result, result.treatments[0]), xlabel=f"effect of "
        f"{result.treatments[0]}", note=note)}


ENTRY = AnalysisKind(
    name="fit", result_type=iv.IVFit, title="2SLS with diagnostics", table_title="2SLS",
    text=text.fit_summary, rows=table_rows.fit_rows, figures=draw, summary_rows=lambda r: [],
    fit_of=lambda r: (r, r.treatments[0]),
    headline=lambda r: r.conf_int(r.treatments[0]), options={}, run=run)
