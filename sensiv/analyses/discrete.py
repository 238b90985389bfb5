"""Registry entry of ``discrete``: bounds for discrete data with an exclusion budget."""

from __future__ import annotations

from sensiv.analyses.kind import AnalysisKind
from sensiv.partial_id import discrete_data, discrete_results
from sensiv.partial_id.discrete import discrete_bounds
from sensiv.present import figures, table_rows
from sensiv.present import text_discrete

OPTIONS = {"budget": float, "monotone": bool, "defier_budget": float, "threshold": float,
           "reps": int, "points": int, "counts": str}


def run(context, options) -> discrete_results.DiscreteBounds:
    o = options
    if "counts" in o:
        roles = context.roles or {}
        table = discrete_data.read_counts(o["counts"], outcome=roles.get("outcome", "y"),
                                          treatment=(roles.get("treatments") or ["x"])[0],
                                          instrument=(roles.get("instruments") or ["z"])[0])
    else:
        table = discrete_data.tabulate(context.source)
    return discrete_bounds(table, o.get("budget", 0.1), monotone=o.get("monotone", False),
                           defier_budget=o.get("defier_budget", 0.0),
                           threshold=o.get("threshold", 0.0), reps=o.get("reps", 999),
                           points=o.get("points", 51), seed=context.seed,
                           confidence_level=context.common["confidence_level"],
                           progress=False)


def draw(result, note):
    return {"curve": figures.discrete_curve(result, note=note)}


ENTRY = AnalysisKind(
    name="discrete", result_type=discrete_results.DiscreteBounds,
    title="Discrete bounds with an exclusion budget", table_title="Discrete bounds",
    text=text_discrete.discrete_summary, rows=table_rows.discrete_rows, figures=draw,
    summary_rows=figures.discrete_items, options=OPTIONS, run=run)
