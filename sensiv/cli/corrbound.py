"""Command `sensiv corrbound` (registered on the shared typer app when imported).

Correlation-restriction bounds for an imperfect instrument (Nevo & Rosen 2012): parse the
options, call :func:`sensiv.partial_id.correlation.correlation_bounds`, print or write.
"""

from __future__ import annotations

from pathlib import Path
from typing import Optional

import typer

from sensiv.cli.app import app, guarded
from sensiv.cli.labels import LABEL, document, put_in_force
from sensiv.cli.options import ABSORB, ABSORB_TOLERANCE, ENGINE, SCHEDULER, engine_source
from sensiv.cli.options import (CATEGORICAL, CLUSTER, CONSTANT, CONTROL, FORMAT, INSTRUMENT, JSON,
                                LEVEL, OUTCOME, TREATMENT, WEIGHT, WHERE, check_out, emit,
                                figure_formats, out_option, spec_from_options, write_outputs)
from sensiv.core.limits import MAX_POINTS, MAX_REPS

MAX_RATIO = typer.Option(1.0, "--max-ratio", metavar="NUMBER", help="Largest ratio r̄ in [0, 1] of |corr(Z, u)| to |corr(X, u)|; 0 is the exclusion restriction.")
ENDOGENEITY = typer.Option("unknown", "--endogeneity", metavar="positive|negative|unknown", help="Sign of corr(X, u): positive, negative or unknown (union over both).")
THRESHOLD = typer.Option(0.0, "--threshold", metavar="NUMBER", help="Effect size for the breakdown ratio (smallest r̄ whose set contains it).")
REPS = typer.Option(999, "--reps", metavar="INTEGER", help=f"Bootstrap replicates, 0 to {MAX_REPS:,} (whole clusters are resampled with --cluster).")
SEED = typer.Option(None, "--seed", metavar="INTEGER", help="Seed of the bootstrap [default: drawn and reported].")
POINTS = typer.Option(51, "--points", metavar="INTEGER", help=f"Ratios on the curve from 0 to --max-ratio (2 to {MAX_POINTS:,}).")


EXAMPLE = ("\b\n"
           "Example (on the invented demo data in examples/):\n"
           "  sensiv corrbound examples/irrigation.csv --outcome maize_yield \\\n"
           "      --treatment irrigation_hours --instrument height_m --control plot_ha \\\n"
           "      --control soil --cluster village --max-ratio 0.1 --reps 199 --seed 1")


@app.command(epilog=EXAMPLE)
@guarded
def corrbound(
    data: Path = typer.Argument(..., metavar="DATA", help="CSV, Parquet or Stata .dta file; a directory or glob of Parquet / CSV files (hive partitions give columns); or file.duckdb::table."),
    outcome: str = OUTCOME,
    treatment: list[str] = TREATMENT,
    instrument: list[str] = INSTRUMENT,
    control: Optional[list[str]] = CONTROL,
    categorical: Optional[list[str]] = CATEGORICAL,
    absorb: Optional[list[str]] = ABSORB,
    absorb_tolerance: Optional[float] = ABSORB_TOLERANCE,
    where: Optional[str] = WHERE,
    cluster: Optional[list[str]] = CLUSTER,
    weight: Optional[str] = WEIGHT,
    max_ratio: float = MAX_RATIO,
    endogeneity: str = ENDOGENEITY,
    threshold: float = THRESHOLD,
    reps: int = REPS,
    seed: Optional[int] = SEED,
    points: int = POINTS,
    level: float = LEVEL,
    constant: bool = CONSTANT,
    engine: str = ENGINE,
    scheduler: Optional[str] = SCHEDULER,
    label: Optional[list[str]] = LABEL,
    as_json: bool = JSON,
    out: Optional[Path] = out_option("Also write corrbound.json and corrbound.md here."),
    formats: Optional[list[str]] = FORMAT,
) -> None:
    """Bounds on the effect when each instrument may be correlated with the error, in the
    treatment's direction and at most --max-ratio times as strongly (Nevo & Rosen 2012)."""
    check_out(out)
    from sensiv.core.errors import InputError
    from sensiv.data.spec import used_columns
    from sensiv.partial_id.correlation import (check_one_treatment, check_options,
                                              correlation_bounds)
    from sensiv.present.text_correlation import bounds_markdown
    from sensiv.present.writer import to_json

    chosen = figure_formats(formats)

    if reps < 1:
        raise InputError(f"--reps {reps} is not a number of bootstrap replicates; give a "
                         "positive integer such as 999")
    check_options(max_ratio=max_ratio, endogeneity=endogeneity, threshold=threshold,
                  points=points, reps=reps, seed=seed, confidence_level=level)
    spec = spec_from_options(outcome, treatment, instrument, control, cluster, weight, constant,
                             where, categorical, absorb, absorb_tolerance)
    check_one_treatment(spec)
    put_in_force(label, used_columns(spec))
    result = correlation_bounds(engine_source(data, spec, engine, scheduler), max_ratio=max_ratio,
                                endogeneity=endogeneity, threshold=threshold, points=points,
                                reps=reps, seed=seed, confidence_level=level, progress=not as_json)
    labelled = document(result.to_dict())
    if out is not None:
        write_outputs(out, result, {"corrbound.json": to_json(labelled),
                           "corrbound.md": bounds_markdown(result)}, chosen)
    emit(labelled, str(result), as_json)
