"""Registry entry of ``corrbound``: bounds under a correlation restriction (Nevo & Rosen)."""

from __future__ import annotations

from sensiv.analyses.kind import AnalysisKind
from sensiv.partial_id import correlation, correlation_results
from sensiv.present import figures, table_rows
from sensiv.present import text_correlation

OPTIONS = {"max_ratio": float, "endogeneity": str, "threshold": float, "reps": int,
           "points": int}


def run(context, options) -> correlation_results.CorrelationBounds:
    o = options
    return correlation.correlation_bounds(
        context.source, max_ratio=o.get("max_ratio", 1.0),
        endogeneity=o.get("endogeneity", "unknown"), threshold=o.get("threshold", 0.0),
        reps=o.get("reps", 999), points=o.get("points", 51), seed=context.seed,
        confidence_level=context.common["confidence_level"], progress=False)


def draw(result, note):
    return {"curve": figures.correlation_curve(result, note=note)}


ENTRY = AnalysisKind(
    name="corrbound", result_type=correlation_results.CorrelationBounds,
    title="Correlation-restriction bounds", table_title="Correlation-restriction bounds",
    text=text_correlation.correlation_summary, rows=table_rows.corrbound_rows, figures=draw,
    summary_rows=figures.correlation_items, options=OPTIONS, run=run)
