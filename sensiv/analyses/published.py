"""Registry entry of ``published``: a stress test from a table's printed numbers."""

from __future__ import annotations

from sensiv.analyses import sweep
from sensiv.analyses.kind import AnalysisKind
from sensiv.core.errors import InputError
from sensiv.present import figures, table_rows
from sensiv.present import text_published
from sensiv.sensitivity import bounds, published

NUMBERS = ("estimate", "se", "first_stage", "first_stage_se", "first_stage_f", "reduced_form",
           "reduced_form_se", "n")
OPTIONS = {"estimate": float, "se": float, "first_stage": float, "first_stage_se": float,
           "reduced_form": float, "reduced_form_se": float, "first_stage_f": float, "n": int,
           "direct": list, "prior": list, "threshold": float, "points": int}
REQUIRED = ("estimate", "se", "first_stage", "direct")


def run(context, options) -> published.PublishedResult:
    o = options
    missing = [k for k in REQUIRED if k not in o]
    if missing:
        raise InputError(f"published analysis of study '{context.study}' lacks "
                         f"{', '.join(missing)}; add them to its [[analysis]] table")
    return published.published_analysis(
        **{k: o[k] for k in NUMBERS if k in o}, direct=o["direct"], prior=o.get("prior"),
        threshold=o.get("threshold", 0.0), points=o.get("points", bounds.DEFAULT_POINTS),
        confidence_level=context.common["confidence_level"])


ENTRY = AnalysisKind(
    name="published", result_type=published.PublishedResult,
    title="Stress test of printed numbers",
    table_title="Direct-effect stress test from printed numbers",
    text=text_published.published_text, rows=table_rows.published_rows, figures=sweep.draw,
    summary_rows=figures.published_items, headline=lambda r: r.union_ci, options=OPTIONS,
    run=run, needs_data=False, note_heading="direct-effect stress test from printed numbers")
