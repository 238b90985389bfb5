"""Command `sensiv published` (registered on the shared typer app when imported).

Direct-effect stress test of a published IV estimate from its printed numbers only: parse the
options, call :func:`sensiv.sensitivity.published.published_analysis`, print or write.
"""

from __future__ import annotations

from pathlib import Path
from typing import Optional

import typer

from sensiv.cli.app import app, guarded
from sensiv.cli.labels import PUBLISHED_LABEL, document, published_roles, put_in_force
from sensiv.core.limits import MAX_POINTS
from sensiv.cli.options import (FORMAT, JSON, LEVEL, THRESHOLD, check_out, emit, figure_formats,
                                out_option, write_outputs)


EXAMPLE = ("\b\n"
           "Example (on the invented demo data in examples/):\n"
           "  sensiv published --estimate 0.75 --se 0.25 --first-stage 4.2 \\\n"
           "      --first-stage-se 0.6 --reduced-form 3.15 --reduced-form-se 0.95 --n 212 \\\n"
           "      --direct=-0.25:0.25rf")


@app.command(epilog=EXAMPLE)
@guarded
def published(
    estimate: float = typer.Option(..., "--estimate", metavar="NUMBER", help="Printed IV (2SLS) estimate."),
    se: float = typer.Option(..., "--se", metavar="NUMBER", help="Printed standard error of the IV estimate."),
    first_stage: float = typer.Option(..., "--first-stage", metavar="NUMBER", help="Printed first-stage coefficient of the instrument."),
    first_stage_se: Optional[float] = typer.Option(None, "--first-stage-se", metavar="NUMBER", help="Its standard error (or give --first-stage-f)."),
    reduced_form: Optional[float] = typer.Option(None, "--reduced-form", metavar="NUMBER", help="Printed reduced-form coefficient of the instrument (outcome on instrument)."),
    reduced_form_se: Optional[float] = typer.Option(None, "--reduced-form-se", metavar="NUMBER", help="Its standard error; with it the covariance of reduced form and first stage is backed out, without it a worst case is used."),
    first_stage_f: Optional[float] = typer.Option(None, "--first-stage-f", metavar="NUMBER", help="Printed first-stage F (one instrument); used when --first-stage-se is missing, checked otherwise."),
    n: Optional[int] = typer.Option(None, "--n", metavar="INTEGER", help="Sample size (reported only)."),
    direct: Optional[str] = typer.Option(
        None, "--direct", metavar="LOW:HIGH",
        help="Assumed range LOW:HIGH of the instrument's direct effect on the outcome, in outcome "
             "units or with suffix 'rf' (share of the reduced form). Write --direct=-0.1:0.1 "
             "when LOW is negative."),
    prior_law: Optional[str] = typer.Option(
        None, "--prior", metavar="LAW",
        help="Prior of the direct effect: normal:MEAN:SD, uniform:LOW:HIGH or "
             "triangular:LOW:MODE:HIGH."),
    threshold: float = THRESHOLD,
    points: int = typer.Option(101, "--points", metavar="INTEGER", help=f"Curve points over scalings 0..1 of the range (2 to {MAX_POINTS:,})."),
    level: float = LEVEL,
    label: Optional[list[str]] = PUBLISHED_LABEL,
    as_json: bool = JSON,
    out: Optional[Path] = out_option("Write published.json and published.md here."),
    formats: Optional[list[str]] = FORMAT,
) -> None:
    """Stress test from a paper's printed numbers: identified set, union of intervals,
    breakdown, weak-IV-robust set and prior interval (one instrument, no data)."""
    check_out(out)
    from sensiv.present.text_published import published_markdown
    from sensiv.present.writer import to_json
    from sensiv.sensitivity.published import published_analysis

    chosen = figure_formats(formats)
    put_in_force(label, published_roles())

    result = published_analysis(
        estimate=estimate, se=se, first_stage=first_stage, first_stage_se=first_stage_se,
        first_stage_f=first_stage_f, reduced_form=reduced_form, reduced_form_se=reduced_form_se,
        n=n, direct=direct, prior=prior_law, threshold=threshold, points=points,
        confidence_level=level)
    labelled = document(result.to_dict())
    if out is not None:
        write_outputs(out, result, {"published.json": to_json(labelled),
                           "published.md": published_markdown(result)}, chosen)
    emit(labelled, str(result), as_json)
