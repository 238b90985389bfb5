"""Option declarations shared by the commands (one spelling per idea) and the small helpers
every command uses: figure formats, writing ``--out``, building the Spec, printing."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Optional

import typer

# Shared option declarations (one spelling per idea, shared by every analysis command).
OUTCOME = typer.Option(..., "--outcome", help="Outcome column (y).")


TREATMENT = typer.Option(..., "--treatment", help="Endogenous treatment column; repeat for several.")


INSTRUMENT = typer.Option(..., "--instrument", help="Excluded instrument column; repeat for several.")


CONTROL = typer.Option(None, "--control", help="Exogenous control column; repeat. Text columns become indicators (first level dropped).")


WHERE = typer.Option(None, "--where", help="Keep only the rows matching a filter such as \"age >= 18 and region in ['north', 'east']\" (==, !=, <, <=, >, >=, in [...], is missing, and, or, not, parentheses).")


CATEGORICAL = typer.Option(None, "--categorical", help="Integer-coded control to turn into indicators (first level dropped); repeat for several.")


SE = typer.Option(None, "--se", help="Covariance: classic, robust or cluster [default: cluster if --cluster is given, else robust].")


CLUSTER = typer.Option(None, "--cluster", help="Cluster column for one-way clustered covariance.")


WEIGHT = typer.Option(None, "--weight", help="Column of positive analytic weights.")


LEVEL = typer.Option(0.95, "--level", help="Confidence level, in (0, 1).")


SMALL = typer.Option(False, "--small", help="Finite-sample corrections with t and F reference laws.")


CONSTANT = typer.Option(True, "--constant/--no-constant", help="Include a constant.")


JSON = typer.Option(False, "--json", help="Print exactly one JSON document on stdout.")


FORMAT = typer.Option(None, "--format", help="Figure format: png, pdf or svg; repeat for several [default: png; for run, the recipe's formats].")


FOCUS = typer.Option(None, "--focus", help="Treatment whose coefficient is examined [default: the first].")


THRESHOLD = typer.Option(0.0, "--threshold", help="The conclusion examined is 'effect > threshold' (or '<').")


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
    from sensiv.present.writer import write_bundle

    write_bundle(out, {**files, **table_files(result), **figure_files(result, formats)})


def spec_from_options(outcome, treatment, instrument, control, cluster, weight, constant,
                      where=None, categorical=None):
    from sensiv.data import Spec

    return Spec(outcome=outcome, treatments=tuple(treatment), instruments=tuple(instrument),
                controls=tuple(control or ()), cluster=cluster, weight=weight,
                constant=constant, where=where, categorical=tuple(categorical or ()))


def emit(document: dict, text: str, as_json: bool) -> None:
    from sensiv.present.writer import to_json

    if as_json:
        sys.stdout.write(to_json(document))
    else:
        typer.echo(text)


def data_source(data, outcome, treatment, instrument, control, cluster, weight, constant,
                where=None, categorical=None):
    from sensiv.data import from_file

    return from_file(data, spec_from_options(outcome, treatment, instrument, control, cluster,
                                             weight, constant, where, categorical))
