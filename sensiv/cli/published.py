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
from sensiv.core.limits import MAX_POINTS, MAX_REPS
from sensiv.cli.per_instrument import (missing, number, refuse_single_only, refuse_table_only,
                                       run_table)
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
    estimate: Optional[str] = typer.Option(None, "--estimate", metavar="NUMBER", help="Printed IV (2SLS) estimate (required without --per-instrument)."),
    se: Optional[str] = typer.Option(None, "--se", metavar="NUMBER", help="Printed standard error of the IV estimate (required without --per-instrument)."),
    first_stage: Optional[str] = typer.Option(None, "--first-stage", metavar="NUMBER|COLUMN", help="Printed first-stage coefficient of the instrument; with --per-instrument the column of the first-stage associations."),
    first_stage_se: Optional[str] = typer.Option(None, "--first-stage-se", metavar="NUMBER|COLUMN", help="Its standard error (or give --first-stage-f); with --per-instrument the column of their SEs."),
    reduced_form: Optional[str] = typer.Option(None, "--reduced-form", metavar="NUMBER|COLUMN", help="Printed reduced-form coefficient of the instrument (outcome on instrument); with --per-instrument the column of the reduced-form associations."),
    reduced_form_se: Optional[str] = typer.Option(None, "--reduced-form-se", metavar="NUMBER|COLUMN", help="Its standard error; with it the covariance of reduced form and first stage is backed out, without it a worst case is used. With --per-instrument the column of their SEs."),
    first_stage_f: Optional[float] = typer.Option(None, "--first-stage-f", metavar="NUMBER", help="Printed first-stage F (one instrument); used when --first-stage-se is missing, checked otherwise."),
    n: Optional[int] = typer.Option(None, "--n", metavar="INTEGER", help="Sample size (reported only)."),
    per_instrument: Optional[Path] = typer.Option(None, "--per-instrument", metavar="TABLE", help="A per-instrument table (CSV or Parquet, one row per instrument, e.g. the variants of a Mendelian randomisation study): --first-stage, --first-stage-se, --reduced-form and --reduced-form-se then name its columns."),
    name: Optional[str] = typer.Option(None, "--name", metavar="COLUMN", help="With --per-instrument: the column naming each instrument [default: row numbers]."),
    weights: Optional[str] = typer.Option(None, "--weights", metavar="first|second", help="With --per-instrument: IVW weights from the reduced-form SE only (first, the default) or also the first-stage SE (second)."),
    reps: Optional[int] = typer.Option(None, "--reps", metavar="INTEGER", help=f"With --per-instrument: bootstrap replicates of the weighted median and mode-based estimate, 2 to {MAX_REPS:,} [default: 1000]."),
    seed: Optional[int] = typer.Option(None, "--seed", metavar="INTEGER", help="With --per-instrument: seed of those bootstraps [default: drawn and reported]."),
    direct: Optional[str] = typer.Option(
        None, "--direct", metavar="LOW:HIGH",
        help="Assumed range LOW:HIGH of the instrument's direct effect on the outcome, in outcome "
             "units or with suffix 'rf' (share of the reduced form). Write --direct=-0.1:0.1 "
             "when LOW is negative. With --per-instrument: one range for every instrument, "
             "in outcome units or with suffix 'se' (multiples of each instrument's "
             "reduced-form SE) or 'rf'."),
    prior_law: Optional[str] = typer.Option(
        None, "--prior", metavar="LAW",
        help="Prior of the direct effect: normal:MEAN:SD, uniform:LOW:HIGH or "
             "triangular:LOW:MODE:HIGH. With --per-instrument: normal:MEAN:SD for every "
             "instrument's direct effect, independently (suffix 'se' or 'rf' allowed)."),
    direct_polytope: Optional[Path] = typer.Option(None, "--direct-polytope", metavar="FILE", help="With --per-instrument, instead of --direct: CSV with one column per instrument (named as in --name) and 'bound', rows a'alpha <= bound in outcome units."),
    mode_bandwidth: Optional[float] = typer.Option(None, "--mode-bandwidth", metavar="PHI", help="With --per-instrument: bandwidth parameter phi > 0 of the mode-based estimate, a multiple of the rule-of-thumb bandwidth [default: 1]."),
    threshold: float = THRESHOLD,
    points: int = typer.Option(101, "--points", metavar="INTEGER", help=f"Curve points over scalings 0..1 of the range (2 to {MAX_POINTS:,})."),
    level: float = LEVEL,
    label: Optional[list[str]] = PUBLISHED_LABEL,
    as_json: bool = JSON,
    out: Optional[Path] = out_option("Write published.json and published.md here."),
    formats: Optional[list[str]] = FORMAT,
) -> None:
    """Stress test from a paper's printed numbers: identified set, union of intervals,
    breakdown, weak-IV-robust set and prior interval (one instrument, no data); with
    --per-instrument TABLE, the IVW estimate and the robust yardsticks (MR-Egger, weighted
    median, mode-based) of a many-instrument study from its per-instrument associations."""
    check_out(out)
    chosen = figure_formats(formats)
    if per_instrument is not None:
        refuse_single_only({"--estimate": estimate, "--se": se, "--first-stage-f": first_stage_f,
                            "--n": n})
        columns = {"first_stage": first_stage, "first_stage_se": first_stage_se,
                   "reduced_form": reduced_form, "reduced_form_se": reduced_form_se}
        run_table(per_instrument, columns, name, weights=weights, reps=reps, seed=seed,
                  level=level, direct=direct, prior=prior_law, threshold=threshold,
                  polytope=direct_polytope, mode_bandwidth=mode_bandwidth,
                  points=points, as_json=as_json, out=out, formats=chosen)
        return
    for option, value in (("--estimate", estimate), ("--se", se), ("--first-stage", first_stage)):
        if value is None:
            raise missing(option)
    values = {key: number(text, option) for key, text, option in (
        ("estimate", estimate, "--estimate"), ("se", se, "--se"),
        ("first_stage", first_stage, "--first-stage"),
        ("first_stage_se", first_stage_se, "--first-stage-se"),
        ("reduced_form", reduced_form, "--reduced-form"),
        ("reduced_form_se", reduced_form_se, "--reduced-form-se"))}
    refuse_table_only({"--name": name, "--weights": weights, "--reps": reps, "--seed": seed,
                       "--direct-polytope": direct_polytope, "--mode-bandwidth": mode_bandwidth})
    from sensiv.present.text_published import published_markdown
    from sensiv.present.writer import to_json
    from sensiv.sensitivity.published import published_analysis

    put_in_force(label, published_roles())

    result = published_analysis(
        **values, first_stage_f=first_stage_f, n=n, direct=direct, prior=prior_law,
        threshold=threshold, points=points, confidence_level=level)
    labelled = document(result.to_dict())
    if out is not None:
        write_outputs(out, result, {"published.json": to_json(labelled),
                           "published.md": published_markdown(result)}, chosen)
    emit(labelled, str(result), as_json)
