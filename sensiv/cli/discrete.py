"""Command `sensiv discrete` (registered on the shared typer app when imported)."""

from __future__ import annotations

from pathlib import Path
from typing import Optional

import typer

from sensiv.cli.app import app, guarded
from sensiv.cli.labels import LABEL, document, put_in_force
from sensiv.cli.options import (ENGINE, FORMAT, INSTRUMENT, JSON, LEVEL, OUTCOME, SCHEDULER,
                                TREATMENT, WHERE, check_engine, check_out, emit,
                                engine_source, figure_formats, out_option, write_outputs)

EXIT_SOLVER_FAILURE = 1


def _one(names: list[str], role: str) -> str:
    from sensiv.core.errors import InputError

    if len(names) != 1:
        raise InputError(f"`sensiv discrete` takes exactly one --{role}; got {len(names)} "
                         f"({', '.join(map(repr, names))}): give one")
    return names[0]


EXAMPLE = ("\b\n"
           "Example (on the invented demo data in examples/):\n"
           "  sensiv discrete examples/nudge.csv --outcome bp_controlled --treatment screened \\\n"
           "      --instrument sms --budget 0.05 --reps 199 --seed 1")


@app.command(epilog=EXAMPLE)
@guarded
def discrete(
    data: Path = typer.Argument(..., metavar="DATA",
        help="CSV, Parquet or Stata .dta file: one row per unit, "
                                          "or a table of counts with --counts."),
    outcome: str = OUTCOME,
    treatment: list[str] = TREATMENT,
    instrument: list[str] = INSTRUMENT,
    where: Optional[str] = WHERE,
    counts: bool = typer.Option(False, "--counts", help="DATA is a counts table: columns for the "
                                "instrument, treatment and outcome plus a 'count' column."),
    budget: float = typer.Option(0.1, "--budget", metavar="NUMBER", help="Largest share of units whose outcome "
                                 "the instrument changes directly, in [0, 1]; 0 is the "
                                 "exclusion restriction."),
    monotone: bool = typer.Option(False, "--monotone", help="Assume no defiers: the treatment "
                                  "never falls as the instrument moves up its sorted levels."),
    defier_budget: float = typer.Option(0.0, "--defier-budget", metavar="NUMBER", help="With --monotone: largest "
                                        "share of defiers allowed, in [0, 1]."),
    threshold: float = typer.Option(0.0, "--threshold", metavar="NUMBER", help="Effect value for the breakdown "
                                    "budget (smallest budget whose bounds contain it)."),
    reps: int = typer.Option(999, "--reps", metavar="INTEGER", help="Bootstrap replicates, 10 to 10,000,000 (0: no interval)."),
    seed: Optional[int] = typer.Option(None, "--seed", metavar="INTEGER", help="Seed of the bootstrap [default: "
                                       "drawn and reported]."),
    points: int = typer.Option(51, "--points", metavar="INTEGER", help="Budgets on the curve (2 to 10,001)."),
    max_budget: Optional[float] = typer.Option(None, "--max-budget", metavar="NUMBER", help="End of the curve "
                                               "[default: the budget, at least 0.1, extended "
                                               "past the breakdown budget]."),
    level: float = LEVEL,
    engine: str = ENGINE,
    scheduler: Optional[str] = SCHEDULER,
    label: Optional[list[str]] = LABEL,
    as_json: bool = JSON,
    out: Optional[Path] = out_option("Also write discrete.json and "
                                       "discrete.md here."),
    formats: Optional[list[str]] = FORMAT,
) -> None:
    """Bounds on the effect of a discrete treatment with a budget for direct effects of a
    randomised discrete instrument (Balke-Pearl bounds at budget 0)."""
    check_out(out)
    from sensiv.core.errors import SolverError
    from sensiv.partial_id.discrete import discrete_bounds
    from sensiv.present.writer import to_json
    from sensiv.present.markdown import discrete_markdown

    chosen = figure_formats(formats)
    check_engine(engine, scheduler)
    x, z = _one(treatment, "treatment"), _one(instrument, "instrument")
    put_in_force(label, (outcome, x, z))
    if counts:
        from sensiv.core.errors import InputError
        from sensiv.partial_id.discrete_data import read_counts

        if where is not None:
            raise InputError("--where filters rows of unit-level data, not a counts table "
                             "(--counts): filter the counts file itself, or drop --where")

        if engine != "numpy":
            raise InputError(f"--engine {engine} reads unit-level data; a counts table "
                             "(--counts) is read in this process: drop --engine")
        table = read_counts(data, outcome=outcome, treatment=x, instrument=z)
    else:
        from sensiv.data import Spec
        from sensiv.partial_id.discrete_data import tabulate

        table = tabulate(engine_source(data, Spec(outcome=outcome, treatments=(x,),
                                                  instruments=(z,), where=where),
                                       engine, scheduler))
    try:
        result = discrete_bounds(table, budget, monotone=monotone, defier_budget=defier_budget,
                                 threshold=threshold, reps=reps, seed=seed, points=points,
                                 max_budget=max_budget, confidence_level=level,
                                 progress=not as_json)
    except SolverError as exc:
        typer.echo(f"error: {exc}; the bounds could not be computed (report this with the "
                   "data, if you can)", err=True)
        raise typer.Exit(EXIT_SOLVER_FAILURE) from exc
    labelled = document(result.to_dict())
    if out is not None:
        write_outputs(out, result, {"discrete.json": to_json(labelled),
                                    "discrete.md": discrete_markdown(result)}, chosen)
    emit(labelled, str(result), as_json)

