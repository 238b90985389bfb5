"""Command `sensiv calibrate` (registered on the shared typer app when imported).

Reference magnitudes for a plausible direct effect: the scale of the reduced form, covariate
yardsticks and a zero-first-stage estimate (van Kippersluis & Rietveld 2018).  Parses the
options, calls :func:`sensiv.sensitivity.calibrate.calibrate`, prints or writes.
"""

from __future__ import annotations

from pathlib import Path
from typing import Optional

import typer

from sensiv.cli.app import app, guarded
from sensiv.cli.labels import LABEL, document, put_in_force
from sensiv.cli.options import ABSORB, ABSORB_TOLERANCE, ENGINE, SCHEDULER, engine_source
from sensiv.cli.options import (CATEGORICAL, CLUSTER, CONSTANT, CONTROL, FORMAT, INSTRUMENT, JSON,
                                LEVEL, OUTCOME, SE, SMALL, TREATMENT, WEIGHT, WHERE, check_out,
                                emit, figure_formats, out_option, spec_from_options, write_outputs)

GROUP = typer.Option(None, "--group", metavar="NAME=COL1,COL2", help="NAME=COL1,COL2: a yardstick that leaves out these controls together; repeat for several.")
NO_FIRST_STAGE_GROUP = typer.Option(None, "--no-first-stage-group", metavar="COLUMN", help="0/1 column; rows with 1 form a subgroup where the instrument is believed not to move the treatment (van Kippersluis & Rietveld 2018).")


EXAMPLE = ("\b\n"
           "Example (on the invented demo data in examples/):\n"
           "  sensiv calibrate examples/irrigation.csv --outcome maize_yield \\\n"
           "      --treatment irrigation_hours --instrument height_m --control plot_ha \\\n"
           "      --control soil --cluster village")


@app.command(epilog=EXAMPLE)
@guarded
def calibrate(
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
    group: Optional[list[str]] = GROUP,
    no_first_stage_group: Optional[str] = NO_FIRST_STAGE_GROUP,
    engine: str = ENGINE,
    scheduler: Optional[str] = SCHEDULER,
    label: Optional[list[str]] = LABEL,
    as_json: bool = JSON,
    out: Optional[Path] = out_option("Also write calibrate.json and calibrate.md here."),
    formats: Optional[list[str]] = FORMAT,
) -> None:
    """How large a direct effect is plausible: reduced-form scale, leave-one-out yardsticks and a
    zero-first-stage estimate, each turned into options for sweep and prior."""
    check_out(out)
    from sensiv.present.text_calibrate import calibration_markdown
    from sensiv.sensitivity import calibrate as calibration
    from sensiv.data.spec import used_columns
    from sensiv.estimation import iv
    from sensiv.present.writer import to_json

    chosen = figure_formats(formats)

    spec = spec_from_options(outcome, treatment, instrument, control, cluster, weight, constant,
                             where, categorical, absorb, absorb_tolerance)
    iv.check_options(se or ("cluster" if cluster else "robust"), cluster, level)
    put_in_force(label, used_columns(spec))
    groups = calibration.parse_groups(group or [])
    if engine != "numpy" or scheduler is not None:
        data = engine_source(data, spec, engine, scheduler)
    result = calibration.calibrate(data, spec, groups=groups,
                                   no_first_stage_group=no_first_stage_group, se=se,
                                   confidence_level=level, small=small)
    labelled = document(result.to_dict())
    if out is not None:
        write_outputs(out, result, {"calibrate.json": to_json(labelled),
                           "calibrate.md": calibration_markdown(result)}, chosen)
    emit(labelled, str(result), as_json)
