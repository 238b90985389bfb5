"""Option declarations shared by the commands (one spelling per idea) and the small helpers
every command uses: figure formats, writing ``--out``, building the Spec, printing."""

from __future__ import annotations

import os
import sys
from pathlib import Path
from typing import Optional

import typer

# Shared option declarations (one spelling per idea, shared by every analysis command).
OUTCOME = typer.Option(..., "--outcome", metavar="COLUMN", help="Outcome column (y).")


TREATMENT = typer.Option(..., "--treatment", metavar="COLUMN", help="Endogenous treatment column; repeat for several.")


INSTRUMENT = typer.Option(..., "--instrument", metavar="COLUMN", help="Excluded instrument column; repeat for several.")


CONTROL = typer.Option(None, "--control", metavar="COLUMN", help="Exogenous control column; repeat. Text columns become indicators (first level dropped).")


WHERE = typer.Option(None, "--where", metavar="EXPR", help="Keep only the rows matching a filter such as \"age >= 18 and region in ['north', 'east']\" (==, !=, <, <=, >, >=, in [...], is missing, and, or, not, parentheses).")


CATEGORICAL = typer.Option(None, "--categorical", metavar="COLUMN", help="Integer-coded control to turn into indicators (first level dropped); repeat for several.")


ABSORB = typer.Option(None, "--absorb", metavar="COLUMN", help="Categorical column (text or integer codes) whose fixed effects are partialled out of every other column, without indicator columns; repeat for several.")


ABSORB_TOLERANCE = typer.Option(None, "--absorb-tolerance", metavar="TOL", help="Relative tolerance at which the alternating projections of several --absorb columns stop [default: 1e-10]; one absorbed column is exact.")


SE = typer.Option(None, "--se", metavar="classic|robust|cluster", help="Covariance: classic, robust or cluster [default: cluster if --cluster is given, else robust].")


CLUSTER = typer.Option(None, "--cluster", metavar="COLUMN", help="Cluster column for a clustered covariance; give it twice (--cluster A --cluster B) for two-way clustering (Cameron, Gelbach & Miller 2011).")


WEIGHT = typer.Option(None, "--weight", metavar="COLUMN", help="Column of positive analytic weights.")


LEVEL = typer.Option(0.95, "--level", metavar="NUMBER", help="Confidence level, in (0, 1).")


SMALL = typer.Option(False, "--small", help="Finite-sample corrections with t and F reference laws.")


CONSTANT = typer.Option(True, "--constant/--no-constant", help="Include a constant.")


JSON = typer.Option(False, "--json", help="Print exactly one JSON document on stdout.")


FORMAT = typer.Option(None, "--format", metavar="png|pdf|svg", help="Figure format: png, pdf or svg; repeat for several [default: png; for run, the recipe's formats].")


FOCUS = typer.Option(None, "--focus", metavar="COLUMN", help="Treatment whose coefficient is examined [default: the first].")


THRESHOLD = typer.Option(0.0, "--threshold", metavar="NUMBER", help="The conclusion examined is 'effect > threshold' (or '<').")


ENGINE = typer.Option("numpy", "--engine", metavar="numpy|duckdb|dask", help="Engine of the passes over the rows: numpy (in-process stream), duckdb (SQL inside DuckDB, multi-threaded, out of core; pip install \"sensiv[duckdb]\") or dask (a Dask cluster; pip install \"sensiv[dask]\").")


SCHEDULER = typer.Option(None, "--scheduler", metavar="ADDRESS", help="Address of a running Dask scheduler (tcp://host:8786) for --engine dask [default: start a local cluster, one worker per core].")


def check_engine(engine: str, scheduler: Optional[str]) -> None:
    """Refuse an unknown engine or a scheduler without --engine dask before reading data."""
    from sensiv.data.datasets import check_engine as check

    check(engine, scheduler)


def engine_source(data, spec, engine: str = "numpy", scheduler: Optional[str] = None):
    """The streaming source of DATA (a file, a directory or glob of files, file.duckdb::table)
    read by ``engine``."""
    from sensiv.data import from_file, with_engine

    check_engine(engine, scheduler)
    return with_engine(from_file(data, spec), engine, scheduler)


def out_path(value) -> Path:
    """Parser of every ``--out``-like option: refuse an empty path before any work."""
    if not str(value).strip():
        raise typer.BadParameter("an empty path names no folder (it would write into the "
                                 "current directory); give a folder such as --out results")
    return Path(value)


def out_option(help_text: str, default: Optional[Path] = None, name: str = "--out"):
    """The declaration of an output-folder option (``...`` as ``default`` makes it required)."""
    return typer.Option(default, name, metavar="DIR", help=help_text, parser=out_path)


def _nearest_existing(path: Path) -> Path:
    probe = path
    while not os.path.lexists(probe) and probe != probe.parent:
        probe = probe.parent
    return probe


def check_out(out: Optional[Path], option: str = "--out") -> None:
    """Refuse an output folder that cannot be written, before any work is done: an existing
    file, a parent that is a file, a name too long for the file system, a folder (or its
    nearest existing parent) that is read-only, a folder holding files that are not a previous
    sensiv bundle, the current folder.  Leftovers of a killed earlier run into the same folder
    are repaired first (``sensiv.present.publish.recover``) and reported on stderr."""
    import tempfile

    from sensiv.core.errors import InputError

    if out is None:
        return
    target = Path(os.path.abspath(out))
    fix = f"give another folder with {option}"
    if not str(out).strip():
        raise InputError(f"{option} is empty; {fix}, such as {option} results")
    if os.path.isfile(target):
        raise InputError(f"{option} '{out}' is an existing file, not a folder; {fix} (or move "
                         "the file away)")
    anchor = _nearest_existing(target)
    if not os.path.isdir(anchor):
        raise InputError(f"{option} '{out}': '{anchor}' is a file, so no folder can be made "
                         f"inside it; {fix}")
    limit = os.pathconf(anchor, "PC_NAME_MAX") if hasattr(os, "pathconf") else 255
    for part in target.relative_to(anchor).parts:
        if len(os.fsencode(part)) > limit:
            raise InputError(f"{option}: the name '{part[:40]}...' has {len(os.fsencode(part))} "
                             f"bytes, more than the file system allows ({limit}); give a "
                             f"shorter name with {option}")
    try:
        probe = Path(tempfile.mkdtemp(prefix=".sensiv-probe-", dir=anchor))
        probe.rmdir()
    except OSError as exc:
        raise InputError(f"{option} '{out}': cannot write into '{anchor}' ({exc.strerror}); "
                         f"{fix} where you may write") from exc
    _recover_and_check(out, option)


def _recover_and_check(out: Path, option: str) -> None:
    """Repair what a killed earlier run left beside ``out`` (reported on stderr), then refuse a
    folder that a bundle may not replace (one holding files that sensiv did not write)."""
    from sensiv.core.errors import InputError
    from sensiv.present.publish import check_destination, recover

    try:
        for note in recover(out):
            typer.echo(f"note: {note}", err=True)
    except OSError as exc:
        raise InputError(f"{option} '{out}': cannot repair what an earlier, stopped run left "
                         f"beside it ({exc.strerror or exc}); remove the hidden folders "
                         f"'.{Path(out).name}.sensiv-*' by hand or give another folder with "
                         f"{option}") from exc
    check_destination(out, option)


def figure_formats(formats: Optional[list[str]]) -> tuple[str, ...]:
    """Validated figure formats (a comma-separated value counts as several)."""
    from sensiv.core.errors import InputError

    chosen = [f.strip().lower() for item in (formats or ["png"]) for f in item.split(",") if f]
    for f in chosen:
        if f not in ("png", "pdf", "svg"):
            raise InputError(f"--format '{f}' is not a figure format; choose png, pdf or svg")
    return tuple(dict.fromkeys(chosen))


def write_outputs(out: Optional[Path], result, files: dict, formats: tuple[str, ...]) -> None:
    """Write a command's own files plus its tables (Markdown, LaTeX, CSV, JSON) and figures
    into ``out`` — everything rendered first, then written atomically."""
    if out is None:
        return
    from sensiv.analyses.outputs import figure_files, table_files

    write_files(out, {**files, **table_files(result), **figure_files(result, formats)})


def write_files(out: Path, files: dict, option: str = "--out") -> None:
    """Publish a bundle whole (``sensiv.present.publish.publish``): ``out`` then holds the
    complete new bundle or, after a failure or a kill, the complete old one; a failure of the
    file system becomes an :class:`InputError` naming the folder (nothing is left behind)."""
    from sensiv.core.errors import InputError
    from sensiv.present.publish import publish

    try:
        publish(out, files, report=lambda note: typer.echo(f"note: {note}", err=True),
                option=option)
    except OSError as exc:
        raise InputError(f"{option} '{out}': writing failed ({exc.strerror or exc}); give a "
                         f"folder where you may write with {option}") from exc


def cluster_value(cluster):
    """A repeated ``--cluster`` as the Spec takes it: ``None``, one name, or a list of two."""
    if cluster is None or isinstance(cluster, str):
        return cluster
    names = list(cluster)
    return None if not names else names[0] if len(names) == 1 else names


def spec_from_options(outcome, treatment, instrument, control, cluster, weight, constant,
                      where=None, categorical=None, absorb=None, absorb_tolerance=None):
    from sensiv.data import Spec

    tolerance = {} if absorb_tolerance is None else {"absorb_tolerance": absorb_tolerance}
    return Spec(outcome=outcome, treatments=tuple(treatment), instruments=tuple(instrument),
                controls=tuple(control or ()), cluster=cluster_value(cluster), weight=weight,
                constant=constant, where=where, categorical=tuple(categorical or ()),
                absorb=tuple(absorb or ()), **tolerance)


def emit(document: dict, text: str, as_json: bool) -> None:
    from sensiv.present.writer import to_json

    if as_json:
        sys.stdout.write(to_json(document))
    else:
        typer.echo(text)


def data_source(data, outcome, treatment, instrument, control, cluster, weight, constant,
                where=None, categorical=None, absorb=None, engine="numpy", scheduler=None,
                absorb_tolerance=None):
    return engine_source(data, spec_from_options(outcome, treatment, instrument, control,
                                                 cluster, weight, constant, where, categorical,
                                                 absorb, absorb_tolerance),
                         engine, scheduler)
