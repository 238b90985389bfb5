"""``sensiv fit``: 2SLS with OLS beside it, first stages, the Anderson–Rubin set and the
overidentification test."""

from __future__ import annotations

from pathlib import Path
from typing import Optional

import typer

from sensiv.cli.app import app, guarded
from sensiv.cli.options import (ENGINE, SCHEDULER, engine_source, CATEGORICAL, CLUSTER, CONSTANT, CONTROL, FORMAT, INSTRUMENT, JSON,
                                LEVEL, OUTCOME, SE, SMALL, TREATMENT, WEIGHT, WHERE, check_out,
                                emit, figure_formats, out_option, spec_from_options, write_outputs)


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
    where: Optional[str] = WHERE,
    se: Optional[str] = SE,
    cluster: Optional[str] = CLUSTER,
    weight: Optional[str] = WEIGHT,
    level: float = LEVEL,
    small: bool = SMALL,
    constant: bool = CONSTANT,
    engine: str = ENGINE,
    scheduler: Optional[str] = SCHEDULER,
    as_json: bool = JSON,
    out: Optional[Path] = out_option("Also write fit.json, fit.md, tables and a figure here."),
    formats: Optional[list[str]] = FORMAT,
) -> None:
    """2SLS with OLS beside it, first stages, Anderson-Rubin set and overidentification test."""
    check_out(out)
    from sensiv.estimation import iv
    from sensiv.present.writer import to_json
    from sensiv.present.markdown import fit_markdown

    chosen = figure_formats(formats)
    spec = spec_from_options(outcome, treatment, instrument, control, cluster, weight, constant,
                             where, categorical)
    iv.check_options(se or ("cluster" if cluster else "robust"), cluster, level)
    result = iv.fit(engine_source(data, spec, engine, scheduler), se=se, confidence_level=level, small=small)
    document = result.to_dict()
    if out is not None:
        write_outputs(out, result, {"fit.json": to_json(document), "fit.md": fit_markdown(result)},
                      chosen)
    emit(document, str(result), as_json)

