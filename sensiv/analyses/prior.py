"""Registry entry of ``prior``: the interval when the direct effect follows a prior law."""

from __future__ import annotations

from sensiv.analyses.kind import AnalysisKind
from sensiv.present import figures, table_rows, text
from sensiv.sensitivity import prior

OPTIONS = {"prior": list, "prior_file": str, "focus": str, "draws": int}


def run(context, options) -> prior.PriorResult:
    o = options
    return prior.prior_analysis(context.source, priors=o.get("prior"),
                                prior_file=o.get("prior_file"), focus=o.get("focus"),
                                draws=o.get("draws", prior.MC_DRAWS),
                                seed=0 if context.seed is None else context.seed,
                                **context.common)


def draw(result, note):
    return {"map": figures.prior_map(result, note=note)} if result.prior_map is not None else {}


ENTRY = AnalysisKind(
    name="prior", result_type=prior.PriorResult, title="Prior interval",
    table_title="Prior interval", text=text.prior_summary, rows=table_rows.prior_rows,
    figures=draw, summary_rows=figures.prior_items, fit_of=lambda r: (r.fit, r.focus),
    headline=lambda r: r.interval, options=OPTIONS, run=run)
