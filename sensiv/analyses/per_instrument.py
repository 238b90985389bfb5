"""Registry entry of ``per_instrument``: IVW and robust yardsticks from a per-instrument table
(``sensiv published --per-instrument``; recipe key ``per_instrument = "table.csv"``)."""

from __future__ import annotations

from sensiv.analyses.kind import AnalysisKind
from sensiv.core.errors import InputError
from sensiv.data.per_instrument import ROLES, read_per_instrument
from sensiv.present import rows_per_instrument, text_published_table
from sensiv.present.figures.per_instrument import (per_instrument_curve,
                                                   per_instrument_prior_map)
from sensiv.present.figures.scatter import per_instrument_scatter
from sensiv.sensitivity import published_table, robust_estimators
from sensiv.sensitivity.associations import check_associations

OPTIONS = {"per_instrument": str, "first_stage": str, "first_stage_se": str,
           "reduced_form": str, "reduced_form_se": str, "name": str, "weights": str,
           "reps": int, "phi": float, "direct": list, "polytope": str, "prior": list,
           "threshold": float, "points": int}
RECIPE_LABELS = {**{r: r for r in ROLES}, "name": "name"}


def analyse(table, columns, name=None, *, labels=None, weights="first", confidence_level=0.95,
            reps=robust_estimators.DEFAULT_REPS, seed=None, phi=robust_estimators.DEFAULT_PHI,
            require_egger=False, **parts) -> published_table.PublishedTableResult:
    """Read the table, validate the associations, run the analysis (shared by CLI and recipe)."""
    kwargs = {} if labels is None else {"labels": labels}
    read = read_per_instrument(table, columns, name, **kwargs)
    c = read.columns
    assoc = check_associations(first_stage=c["first_stage"], first_stage_se=c["first_stage_se"],
                               reduced_form=c["reduced_form"],
                               reduced_form_se=c["reduced_form_se"], names=read.names)
    return published_table.published_table(
        assoc, table=read.source, weights=weights, confidence_level=confidence_level,
        reps=reps, seed=seed, phi=phi, require_egger=require_egger, **parts)


def run(context, options) -> published_table.PublishedTableResult:
    o = options
    missing = [k for k in ("per_instrument", *ROLES) if k not in o]
    if missing:
        raise InputError(f"per_instrument analysis of study '{context.study}' lacks "
                         f"{', '.join(missing)}; add them to its [[analysis]] table")
    return analyse(o["per_instrument"], {r: o[r] for r in ROLES}, o.get("name"),
                   labels=RECIPE_LABELS, weights=o.get("weights", "first"),
                   confidence_level=context.common["confidence_level"],
                   reps=o.get("reps", robust_estimators.DEFAULT_REPS), seed=context.seed,
                   phi=o.get("phi", robust_estimators.DEFAULT_PHI), direct=o.get("direct"),
                   polytope=o.get("polytope"),
                   prior=o.get("prior"), threshold=o.get("threshold", 0.0),
                   points=o.get("points", published_table.DEFAULT_POINTS))


def draw(result, note):
    """The per-instrument scatter with the fitted lines; with ``--direct`` the sensitivity
    curve with its breakdown, with ``--prior`` the map over normal priors (μ, τ)."""
    out = {"scatter": per_instrument_scatter(result, note=note)}
    if result.direct is not None:
        out["curve"] = per_instrument_curve(result.direct, note=note)
    if result.prior is not None:
        out["prior-map"] = per_instrument_prior_map(result.prior, note=note)
    return out


ENTRY = AnalysisKind(
    name="per_instrument", result_type=published_table.PublishedTableResult,
    title="Per-instrument analysis of published associations",
    table_title="IVW and robust yardsticks from per-instrument associations",
    text=text_published_table.per_instrument_text, rows=rows_per_instrument.per_instrument_rows,
    figures=draw, summary_rows=rows_per_instrument.per_instrument_items,
    headline=lambda r: r.ivw.ci_random, options=OPTIONS, run=run, needs_data=False,
    note_heading="per-instrument analysis of published associations")
