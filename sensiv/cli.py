"""The ``sensiv`` command line: parse options, call the layers, print, write.

Only ``typer`` is imported at module level so that ``sensiv --help`` starts instantly; the
numerical layers are imported inside the commands.  Bad input ends with exit code 2 and a
one-paragraph message on stderr, never a traceback.
"""

from __future__ import annotations

import functools
import sys
import warnings
from pathlib import Path
from typing import Optional

import typer

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    rich_markup_mode=None,
    pretty_exceptions_enable=False,
    help="Sensitivity analysis for instrumental-variable estimates whose instrument may have a "
         "direct effect on the outcome.",
)

EXIT_BAD_INPUT = 2


def _fail(message: str) -> None:
    typer.echo(f"error: {message}", err=True)
    raise typer.Exit(EXIT_BAD_INPUT)


def guarded(command):
    """Turn the caller's mistakes (``InputError``) into exit code 2 with a clean message."""
    @functools.wraps(command)
    def wrapper(*args, **kwargs):
        from sensiv.errors import InputError

        try:
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                result = command(*args, **kwargs)
            _echo_warnings(caught)
            return result
        except InputError as exc:
            _fail(str(exc))
    return wrapper


def _echo_warnings(caught) -> None:
    from sensiv.errors import WeakInstrumentWarning

    for w in caught:
        if issubclass(w.category, WeakInstrumentWarning):
            continue  # already part of the printed output and of the JSON "notes"
        typer.echo(f"warning: {w.message}", err=True)


# Shared option declarations (one spelling per idea, shared by every analysis command).
OUTCOME = typer.Option(..., "--outcome", help="Outcome column (y).")
TREATMENT = typer.Option(..., "--treatment", help="Endogenous treatment column; repeat for several.")
INSTRUMENT = typer.Option(..., "--instrument", help="Excluded instrument column; repeat for several.")
CONTROL = typer.Option(None, "--control", help="Exogenous control column; repeat. Text columns become indicators (first level dropped).")
SE = typer.Option(None, "--se", help="Covariance: classic, robust or cluster [default: cluster if --cluster is given, else robust].")
CLUSTER = typer.Option(None, "--cluster", help="Cluster column for one-way clustered covariance.")
WEIGHT = typer.Option(None, "--weight", help="Column of positive analytic weights.")
LEVEL = typer.Option(0.95, "--level", help="Confidence level, in (0, 1).")
SMALL = typer.Option(False, "--small", help="Finite-sample corrections with t and F reference laws.")
CONSTANT = typer.Option(True, "--constant/--no-constant", help="Include a constant.")
JSON = typer.Option(False, "--json", help="Print exactly one JSON document on stdout.")


def spec_from_options(outcome, treatment, instrument, control, cluster, weight, constant):
    from sensiv.data import Spec

    return Spec(outcome=outcome, treatments=tuple(treatment), instruments=tuple(instrument),
                controls=tuple(control or ()), cluster=cluster, weight=weight,
                constant=constant)


def emit(document: dict, text: str, as_json: bool) -> None:
    from sensiv.report import to_json

    if as_json:
        sys.stdout.write(to_json(document))
    else:
        typer.echo(text)


@app.command()
@guarded
def fit(
    data: Path = typer.Argument(..., help="CSV, Parquet or Stata .dta file."),
    outcome: str = OUTCOME,
    treatment: list[str] = TREATMENT,
    instrument: list[str] = INSTRUMENT,
    control: Optional[list[str]] = CONTROL,
    se: Optional[str] = SE,
    cluster: Optional[str] = CLUSTER,
    weight: Optional[str] = WEIGHT,
    level: float = LEVEL,
    small: bool = SMALL,
    constant: bool = CONSTANT,
    as_json: bool = JSON,
    out: Optional[Path] = typer.Option(None, "--out", help="Also write fit.json and fit.md here."),
) -> None:
    """2SLS with OLS beside it, first stages, Anderson-Rubin set and overidentification test."""
    from sensiv import iv
    from sensiv.data import from_file
    from sensiv.report import fit_markdown, to_json, write_bundle

    spec = spec_from_options(outcome, treatment, instrument, control, cluster, weight, constant)
    iv.check_options(se or ("cluster" if cluster else "robust"), cluster, level)
    result = iv.fit(from_file(data, spec), se=se, confidence_level=level, small=small)
    document = result.to_dict()
    if out is not None:
        write_bundle(out, {"fit.json": to_json(document), "fit.md": fit_markdown(result)})
    emit(document, str(result), as_json)


DEMO_DIRECT = "-0.005:0.005"     # assumed direct effect of height (t/ha per metre), invented
DEMO_PRIOR = "normal:0:0.003"    # prior of that direct effect, invented


@app.command()
@guarded
def demo(
    out: Path = typer.Option(Path("sensiv-demo"), "--out", help="Folder for the demo's tables and data."),
    as_json: bool = JSON,
) -> None:
    """Run the main job on built-in INVENTED data (irrigation and maize yield)."""
    from sensiv import bounds, iv
    from sensiv import prior as prior_layer
    from sensiv.data import Spec, from_frame
    from sensiv.demo import csv_bytes, irrigation
    from sensiv.report import fit_markdown, prior_files, sweep_files, to_json, write_bundle

    scenario = irrigation()
    roles = scenario.roles
    spec = Spec(outcome=roles["outcome"], treatments=tuple(roles["treatments"]),
                instruments=tuple(roles["instruments"]), controls=tuple(roles["controls"]),
                cluster=roles.get("cluster"))
    source = from_frame(scenario.frame, spec)
    result = iv.fit(source)
    sens = bounds.sweep(source, direct=[DEMO_DIRECT])
    pri = prior_layer.prior_analysis(source, priors=[DEMO_PRIOR])
    treatment = spec.treatments[0]
    beta = scenario.truth["beta"]
    gamma = scenario.truth["direct_effect"]

    def verdict(interval) -> str:
        return "covers" if interval.contains(beta) else "misses"

    ci = result.conf_int(treatment)
    lines = [
        "sensiv demo: INVENTED data, for illustration only",
        scenario.description,
        "",
        "=== 1. 2SLS with diagnostics (exclusion restriction assumed) ===",
        str(result),
        "",
        f"=== 2. Direct-effect sweep: height's direct effect in [{DEMO_DIRECT}] t/ha per metre ===",
        str(sens),
        "",
        f"=== 3. Prior interval: direct effect ~ {DEMO_PRIOR} ===",
        str(pri),
        "",
        "Truth check (possible only because the data are invented): true effect "
        f"{beta:g}, true direct effect {gamma:g}.",
        f"  2SLS interval {ci} {verdict(ci)} it; union interval {sens.union_ci} "
        f"{verdict(sens.union_ci)} it; prior interval {pri.interval} {verdict(pri.interval)} it.",
    ]
    document = {"scenario": scenario.name, "invented": True, "truth": scenario.truth,
                "description": scenario.description, "fit": result.to_dict(),
                "sweep": sens.to_dict(), "prior": pri.to_dict(),
                "truth_covered_by_ci": ci.contains(beta),
                "truth_covered_by_union_ci": sens.union_ci.contains(beta)}
    readme = ("# sensiv demo (invented data)\n\n" + scenario.description + "\n\n"
              "- `demo.json`: everything below in one document\n"
              "- `fit.json`, `fit.md`: 2SLS with diagnostics\n"
              "- `sweep.json`, `sweep.md`, `curve.csv`: direct-effect sensitivity\n"
              "- `prior.json`, `prior.md`: prior interval\n"
              f"- `{scenario.name}.csv`: the invented data set\n")
    files = {"demo.json": to_json(document), "fit.json": to_json(result.to_dict()),
             "fit.md": fit_markdown(result), **sweep_files(sens), **prior_files(pri),
             f"{scenario.name}.csv": csv_bytes(scenario.frame), "README.md": readme}
    write_bundle(out, files)
    lines.append(f"Written to {out}/: {', '.join(files)}")
    emit(document, "\n".join(lines), as_json)


FOCUS = typer.Option(None, "--focus", help="Treatment whose coefficient is examined [default: the first].")
THRESHOLD = typer.Option(0.0, "--threshold", help="The conclusion examined is 'effect > threshold' (or '<').")


def _data_options(data, outcome, treatment, instrument, control, cluster, weight, constant):
    from sensiv.data import from_file

    return from_file(data, spec_from_options(outcome, treatment, instrument, control, cluster,
                                             weight, constant))


@app.command()
@guarded
def sweep(
    data: Path = typer.Argument(..., help="CSV, Parquet or Stata .dta file."),
    outcome: str = OUTCOME,
    treatment: list[str] = TREATMENT,
    instrument: list[str] = INSTRUMENT,
    control: Optional[list[str]] = CONTROL,
    se: Optional[str] = SE,
    cluster: Optional[str] = CLUSTER,
    weight: Optional[str] = WEIGHT,
    level: float = LEVEL,
    small: bool = SMALL,
    constant: bool = CONSTANT,
    direct: Optional[list[str]] = typer.Option(
        None, "--direct",
        help="Assumed range LOW:HIGH of one instrument's direct effect on the outcome, one per "
             "instrument in order; suffix 'rf' = share of the reduced form, 'sd' = outcome SDs "
             "per instrument SD. Write --direct=-0.1:0.1 when LOW is negative."),
    direct_polytope: Optional[Path] = typer.Option(
        None, "--direct-polytope",
        help="CSV with one column per instrument and 'bound': rows a'g <= bound."),
    threshold: float = THRESHOLD,
    points: int = typer.Option(101, "--points", help="Curve points over scalings 0..1 of the set."),
    focus: Optional[str] = FOCUS,
    adaptive: bool = typer.Option(False, "--adaptive", help="Add the falsification adaptive set (Masten & Poirier 2021) for several instruments."),
    as_json: bool = JSON,
    out: Optional[Path] = typer.Option(None, "--out", help="Write sweep.json, sweep.md and curve.csv here."),
) -> None:
    """Direct-effect sweep: identified set, union of intervals, breakdown point, robust set."""
    from sensiv import bounds, iv
    from sensiv.report import sweep_files, write_bundle

    iv.check_options(se or ("cluster" if cluster else "robust"), cluster, level)
    source = _data_options(data, outcome, treatment, instrument, control, cluster, weight,
                           constant)
    result = bounds.sweep(source, direct=direct or None,
                          polytope=str(direct_polytope) if direct_polytope else None, se=se,
                          confidence_level=level, small=small, threshold=threshold,
                          points=points, focus=focus, adaptive=adaptive)
    if out is not None:
        write_bundle(out, sweep_files(result))
    emit(result.to_dict(), str(result), as_json)


@app.command()
@guarded
def prior(
    data: Path = typer.Argument(..., help="CSV, Parquet or Stata .dta file."),
    outcome: str = OUTCOME,
    treatment: list[str] = TREATMENT,
    instrument: list[str] = INSTRUMENT,
    control: Optional[list[str]] = CONTROL,
    se: Optional[str] = SE,
    cluster: Optional[str] = CLUSTER,
    weight: Optional[str] = WEIGHT,
    level: float = LEVEL,
    small: bool = SMALL,
    constant: bool = CONSTANT,
    prior_law: Optional[list[str]] = typer.Option(
        None, "--prior",
        help="Prior of one instrument's direct effect: normal:MEAN:SD, uniform:LOW:HIGH or "
             "triangular:LOW:MODE:HIGH; one per instrument in order."),
    prior_file: Optional[Path] = typer.Option(
        None, "--prior-file", help="TOML or JSON with 'mean' and 'cov' (multivariate normal)."),
    draws: int = typer.Option(200_000, "--draws", help="Monte Carlo draws (non-normal laws, several instruments)."),
    seed: int = typer.Option(0, "--seed", help="Seed of the Monte Carlo draws."),
    focus: Optional[str] = FOCUS,
    as_json: bool = JSON,
    out: Optional[Path] = typer.Option(None, "--out", help="Write prior.json and prior.md here."),
) -> None:
    """Interval for the effect when the direct effect follows a prior law."""
    from sensiv import iv
    from sensiv import prior as prior_layer
    from sensiv.report import prior_files, write_bundle

    iv.check_options(se or ("cluster" if cluster else "robust"), cluster, level)
    source = _data_options(data, outcome, treatment, instrument, control, cluster, weight,
                           constant)
    result = prior_layer.prior_analysis(
        source, priors=prior_law or None, prior_file=str(prior_file) if prior_file else None,
        se=se, confidence_level=level, small=small, focus=focus, draws=draws, seed=seed)
    if out is not None:
        write_bundle(out, prior_files(result))
    emit(result.to_dict(), str(result), as_json)


# Commands of the partial-identification layer live in their own modules and register
# themselves on ``app`` when imported.
from sensiv import cli_calibrate, cli_corrbound, cli_discrete, cli_published  # noqa: E402,F401


def main() -> None:
    """Console-script entry point."""
    app()


if __name__ == "__main__":
    # Run through the imported module so that the commands registered by the cli_* modules
    # (which import ``sensiv.cli``, not ``__main__``) are on the app that runs.
    from sensiv.cli import main as _main

    _main()
