"""``sensiv prior``: the interval for the effect when the direct effect follows a prior law."""

from __future__ import annotations

from pathlib import Path
from typing import Optional

import typer

from sensiv.cli.app import app, guarded
from sensiv.cli.labels import LABEL, document, put_in_force
from sensiv.cli.options import ABSORB, ABSORB_TOLERANCE, ENGINE, SCHEDULER, engine_source
from sensiv.cli.options import (CATEGORICAL, CLUSTER, CONSTANT, CONTROL, FOCUS, FORMAT, INSTRUMENT,
                                JSON, LEVEL, OUTCOME, SE, SMALL, TREATMENT, WEIGHT, WHERE,
                                check_out, data_source, emit, figure_formats, out_option,
                                write_outputs)
from sensiv.core.limits import MAX_DRAWS, MAX_SEED


EXAMPLE = ("\b\n"
           "Example (on the invented demo data in examples/):\n"
           "  sensiv prior examples/irrigation.csv --outcome maize_yield --treatment irrigation_hours \\\n"
           "      --instrument height_m --control plot_ha --control soil --cluster village \\\n"
           "      --prior normal:0:0.003")


@app.command(epilog=EXAMPLE)
@guarded
def prior(
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
    prior_law: Optional[list[str]] = typer.Option(
        None, "--prior", metavar="LAW",
        help="Prior of one instrument's direct effect: normal:MEAN:SD, uniform:LOW:HIGH or "
             "triangular:LOW:MODE:HIGH; one per instrument in order. Suffix 'rf' (share of the "
             "reduced form) or 'sd' (outcome SDs per instrument SD) as for --direct, e.g. "
             "normal:0:0.1rf."),
    prior_file: Optional[Path] = typer.Option(
        None, "--prior-file", metavar="FILE", help="TOML or JSON with 'mean' and 'cov' (multivariate normal)."),
    draws: int = typer.Option(200_000, "--draws", metavar="INTEGER", help=f"Monte Carlo draws (non-normal laws, several instruments; 1,000 to {MAX_DRAWS:,})."),
    seed: int = typer.Option(0, "--seed", metavar="INTEGER", help=f"Seed of the Monte Carlo draws (0 to {MAX_SEED})."),
    focus: Optional[str] = FOCUS,
    threshold: float = typer.Option(0.0, "--threshold", metavar="NUMBER", help="Threshold for the prior map: which priors leave an interval that excludes it."),
    engine: str = ENGINE,
    scheduler: Optional[str] = SCHEDULER,
    label: Optional[list[str]] = LABEL,
    as_json: bool = JSON,
    out: Optional[Path] = out_option("Write prior.json, prior.md, tables and the prior map here."),
    formats: Optional[list[str]] = FORMAT,
) -> None:
    """Interval for the effect when the direct effect follows a prior law."""
    check_out(out)
    from sensiv.data.spec import used_columns
    from sensiv.estimation import iv
    from sensiv.sensitivity import prior as prior_layer
    from sensiv.present.markdown import prior_files

    chosen = figure_formats(formats)
    iv.check_options(se or ("cluster" if cluster else "robust"), cluster, level)
    source = data_source(data, outcome, treatment, instrument, control, cluster, weight,
                         constant, where, categorical, absorb, engine,
                         scheduler, absorb_tolerance=absorb_tolerance)
    put_in_force(label, used_columns(source.spec))
    result = prior_layer.prior_analysis(
        source, priors=prior_law or None, prior_file=str(prior_file) if prior_file else None,
        se=se, confidence_level=level, small=small, focus=focus, draws=draws, seed=seed,
        threshold=threshold, progress=not as_json)
    if out is not None:
        write_outputs(out, result, prior_files(result), chosen)
    emit(document(result.to_dict()), str(result), as_json)

