"""Registry entry of ``sweep``: direct-effect sets, union of intervals, breakdown."""

from __future__ import annotations

from sensiv.analyses.kind import AnalysisKind
from sensiv.present import figures, table_rows, text
from sensiv.sensitivity import bounds

OPTIONS = {"direct": list, "polytope": str, "threshold": float, "points": int, "focus": str,
           "at": list}


def run(context, options) -> bounds.SweepResult:
    o = options
    return bounds.sweep(context.source, direct=o.get("direct"), polytope=o.get("polytope"),
                        threshold=o.get("threshold", 0.0),
                        points=o.get("points", bounds.DEFAULT_POINTS), focus=o.get("focus"),
                        at=o.get("at"), **context.common)


def draw(result, note):
    """The sensitivity curve, and the breakdown frontier when there is one (shared by the
    stress test of printed numbers)."""
    out = {"curve": figures.sensitivity_curve(result, note=note)}
    if result.frontier is not None:
        out["frontier"] = figures.breakdown_frontier(result, note=note)
    polytope = getattr(result, "direct_polytope", None)   # a stress test has none
    if polytope is not None and polytope.vertices is not None and len(result.instruments) == 2:
        out["polytope"] = figures.polytope_figure(result, note=note)
    return out


ENTRY = AnalysisKind(
    name="sweep", result_type=bounds.SweepResult, title="Direct-effect sweep",
    table_title="Direct-effect sensitivity", text=text.sweep_summary, rows=table_rows.sweep_rows,
    figures=draw, summary_rows=figures.sweep_items, fit_of=lambda r: (r.fit, r.focus),
    headline=lambda r: r.union_ci, options=OPTIONS, run=run)
