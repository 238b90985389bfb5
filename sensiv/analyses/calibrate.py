"""Registry entry of ``calibrate``: yardsticks for a plausible direct effect."""

from __future__ import annotations

from sensiv.analyses.kind import AnalysisKind
from sensiv.core.errors import InputError
from sensiv.present import figures, table_rows
from sensiv.present import text_calibrate
from sensiv.sensitivity import calibrate

OPTIONS = {"groups": dict, "no_first_stage_group": str}


def run(context, options) -> calibrate.Calibration:
    o = options
    groups = o.get("groups", {})
    for name, columns in groups.items():
        if not (isinstance(columns, list) and all(isinstance(c, str) for c in columns)):
            raise InputError(f"groups.{name} of study '{context.study}' must be a list of "
                             "column names")
    # the subgroup is read again from the rows: the frame of a file read into memory, else
    # the source of the files or DuckDB table (on the study's engine)
    subgroup = o.get("no_first_stage_group") and context.frame is not None
    data = context.frame if subgroup else context.source
    return calibrate.calibrate(data, context.spec, groups=groups or None,
                               no_first_stage_group=o.get("no_first_stage_group"),
                               **context.common)


def draw(result, note):
    if result.yardsticks or result.zero_first_stage is not None:
        return {"yardsticks": figures.calibration_yardsticks(result, note=note)}
    return {}


ENTRY = AnalysisKind(
    name="calibrate", result_type=calibrate.Calibration,
    title="Calibrating a plausible violation", table_title="Calibration of direct effects",
    text=text_calibrate.calibration_text, rows=table_rows.calibrate_rows, figures=draw,
    summary_rows=None, options=OPTIONS, run=run,
    note_heading="calibration of direct effects")
