"""``sensiv sweep``: what survives a direct effect of the instruments on the outcome."""

from __future__ import annotations

from pathlib import Path
from typing import Optional

import typer

from sensiv.cli.app import app, guarded
from sensiv.cli.labels import LABEL, document, put_in_force
from sensiv.cli.options import ABSORB, ABSORB_TOLERANCE, ENGINE, SCHEDULER, engine_source
from sensiv.cli.options import (CATEGORICAL, CLUSTER, CONSTANT, CONTROL, FOCUS, FORMAT, INSTRUMENT,
                                JSON, LEVEL, OUTCOME, SE, SMALL, THRESHOLD, TREATMENT, WEIGHT,
                                WHERE, check_out, data_source, emit, figure_formats, out_option,
                                write_files, write_outputs)
from sensiv.core.limits import MAX_POINTS


EXAMPLE = ("\b\n"
           "Example (on the invented demo data in examples/):\n"
           "  sensiv sweep examples/irrigation.csv --outcome maize_yield --treatment irrigation_hours \\\n"
           "      --instrument height_m --control plot_ha --control soil --cluster village \\\n"
           "      --direct=-0.005:0.005 --calibrate")


@app.command(epilog=EXAMPLE)
@guarded
def sweep(
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
    direct: Optional[list[str]] = typer.Option(
        None, "--direct", metavar="LOW:HIGH",
        help="Assumed range LOW:HIGH of one instrument's direct effect on the outcome, one per "
             "instrument in order; suffix 'rf' = share of the reduced form, 'sd' = outcome SDs "
             "per instrument SD. Write --direct=-0.1:0.1 when LOW is negative."),
    direct_polytope: Optional[Path] = typer.Option(
        None, "--direct-polytope", metavar="FILE",
        help="CSV with one column per instrument and 'bound': rows a'g <= bound."),
    threshold: float = THRESHOLD,
    points: int = typer.Option(101, "--points", metavar="INTEGER", help=f"Curve points over scalings 0..1 of the set (2 to {MAX_POINTS:,})."),
    focus: Optional[str] = FOCUS,
    at: Optional[str] = typer.Option(
        None, "--at", metavar="V1,V2,...",
        help="Direct effects v at which to report the intervals over -v..v (for every "
             "instrument at once), e.g. --at 0.005,0.01,0.02; suffix 'rf' or 'sd' as for "
             "--direct."),
    adaptive: bool = typer.Option(False, "--adaptive", help="Add the falsification adaptive set (Masten & Poirier 2021) for several instruments."),
    with_calibration: bool = typer.Option(
        False, "--calibrate",
        help="Also compute the leave-one-out yardsticks (as `sensiv calibrate`) on the same data "
             "and state the breakdown against them in one sentence (JSON: calibration, "
             "against_yardsticks)."),
    engine: str = ENGINE,
    scheduler: Optional[str] = SCHEDULER,
    label: Optional[list[str]] = LABEL,
    as_json: bool = JSON,
    out: Optional[Path] = out_option("Write sweep.json, sweep.md, curve.csv, tables and figures here."),
    formats: Optional[list[str]] = FORMAT,
) -> None:
    """Direct-effect sweep: identified set, union of intervals, breakdown point, robust set."""
    check_out(out)
    from sensiv.sensitivity import bounds
    from sensiv.data.spec import used_columns
    from sensiv.estimation import iv
    from sensiv.present.markdown import sweep_files

    chosen = figure_formats(formats)
    iv.check_options(se or ("cluster" if cluster else "robust"), cluster, level)
    source = data_source(data, outcome, treatment, instrument, control, cluster, weight,
                         constant, where, categorical, absorb, engine,
                         scheduler, absorb_tolerance=absorb_tolerance)
    put_in_force(label, used_columns(source.spec))
    result = bounds.sweep(source, direct=direct or None,
                          polytope=str(direct_polytope) if direct_polytope else None, se=se,
                          confidence_level=level, small=small, threshold=threshold,
                          points=points, focus=focus, adaptive=adaptive, at=at)
    if not with_calibration:
        if out is not None:
            write_outputs(out, result, sweep_files(result), chosen)
        emit(document(result.to_dict()), str(result), as_json)
        return
    from sensiv.analyses.against import marked_curve, with_yardsticks
    from sensiv.analyses.outputs import figure_files, table_files

    combined = with_yardsticks(result, source, se=se, confidence_level=level, small=small)
    if out is not None:
        write_files(out, {**sweep_files(result), **table_files(result),
                          **figure_files(result, chosen), **combined.files,
                          **marked_curve(result, combined.comparison, chosen)})
    emit(document(combined.to_dict()), combined.text, as_json)

