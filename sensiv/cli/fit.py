"""``sensiv fit``: 2SLS with OLS beside it, first stages, the Anderson–Rubin set and the
overidentification test."""

from __future__ import annotations

from pathlib import Path
from typing import Optional

import typer

from sensiv.cli.app import app, guarded
from sensiv.cli.labels import LABEL, document, put_in_force
from sensiv.core.limits import MAX_REPS
from sensiv.cli.options import ABSORB, ABSORB_TOLERANCE, ENGINE, SCHEDULER, engine_source
from sensiv.cli.options import (CATEGORICAL, CLUSTER, CONSTANT, CONTROL, FORMAT, INSTRUMENT, JSON,
                                LEVEL, OUTCOME, SE, SMALL, TREATMENT, WEIGHT, WHERE, check_out,
                                emit, figure_formats, out_option, spec_from_options, write_outputs)


BOOTSTRAP = typer.Option(None, "--bootstrap", metavar="wild", help="Also run the wild restricted efficient cluster bootstrap (Davidson & MacKinnon 2010) of 'effect = threshold' and invert it into an interval; needs --cluster.")
REPS = typer.Option(9999, "--reps", metavar="INTEGER", help=f"Bootstrap replicates, 1 to {MAX_REPS:,}.")
SEED = typer.Option(None, "--seed", metavar="INTEGER", help="Seed of the bootstrap [default: drawn and reported].")
THRESHOLD = typer.Option(0.0, "--threshold", metavar="NUMBER", help="Effect value tested by the bootstrap ('effect = threshold').")


def bootstrapped_fit(source, method: str, *, se, level, small, threshold, reps, seed, progress):
    """The fit with its bootstrap (``--bootstrap``), checked at the boundary."""
    from sensiv.core.errors import InputError
    from sensiv.estimation import wild_bootstrap

    if method not in wild_bootstrap.BOOTSTRAP_METHODS:
        raise InputError(f"--bootstrap '{method}' is not a bootstrap method; choose one of "
                         f"{', '.join(wild_bootstrap.BOOTSTRAP_METHODS)}")
    return wild_bootstrap.fit_with_bootstrap(source, se=se, confidence_level=level,
                                             small=small, threshold=threshold, reps=reps,
                                             seed=seed, progress=progress)


EXAMPLE = ("\b\n"
           "Example (on the invented demo data in examples/):\n"
           "  sensiv fit examples/irrigation.csv --outcome maize_yield --treatment irrigation_hours \\\n"
           "      --instrument height_m --control plot_ha --control soil --cluster village")


@app.command(epilog=EXAMPLE)
@guarded
def fit(
    data: Path = typer.Argument(..., metavar="DATA", help="CSV, Parquet or Stata .dta file; a directory or glob of Parquet / CSV files (hive partitions give columns); or file.duckdb::table."),
    outcome: str = OUTCOME,
    treatment: list[str] = TREATMENT,
    instrument: list[str] = INSTRUMENT,
    control: Optional[list[str]] = CONTROL,
    categorical: Optional[list[str]] = CATEGORICAL,
    absorb: Optional[list[str]] = ABSORB,
    absorb_tolerance: Optional[float] = ABSORB_TOLERANCE,
    where: Optional[str] = WHERE,
    se: Optional[str] = SE,
    cluster: Optional[list[str]] = CLUSTER,
    weight: Optional[str] = WEIGHT,
    level: float = LEVEL,
    small: bool = SMALL,
    constant: bool = CONSTANT,
    engine: str = ENGINE,
    scheduler: Optional[str] = SCHEDULER,
    label: Optional[list[str]] = LABEL,
    as_json: bool = JSON,
    out: Optional[Path] = out_option("Also write fit.json, fit.md, tables and a figure here."),
    formats: Optional[list[str]] = FORMAT,
    bootstrap: Optional[str] = BOOTSTRAP,
    reps: int = REPS,
    seed: Optional[int] = SEED,
    threshold: float = THRESHOLD,
) -> None:
    """2SLS with OLS beside it, first stages, Anderson-Rubin set and overidentification test."""
    check_out(out)
    from sensiv.data.spec import used_columns
    from sensiv.estimation import iv
    from sensiv.present.writer import to_json
    from sensiv.present.markdown import fit_markdown

    chosen = figure_formats(formats)
    spec = spec_from_options(outcome, treatment, instrument, control, cluster, weight, constant,
                             where, categorical, absorb, absorb_tolerance)
    iv.check_options(se or ("cluster" if cluster else "robust"), cluster, level)
    put_in_force(label, used_columns(spec))
    source = engine_source(data, spec, engine, scheduler)
    if bootstrap is None:
        result = iv.fit(source, se=se, confidence_level=level, small=small)
    else:
        result = bootstrapped_fit(source, bootstrap, se=se or iv.default_se(spec),
                                  level=level, small=small, threshold=threshold, reps=reps,
                                  seed=seed, progress=not as_json)
    labelled = document(result.to_dict())
    if out is not None:
        write_outputs(out, result, {"fit.json": to_json(labelled), "fit.md": fit_markdown(result)},
                      chosen)
    emit(labelled, str(result), as_json)

