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
EXIT_SOLVER = 1


def _fail(message: str) -> None:
    typer.echo(f"error: {message}", err=True)
    raise typer.Exit(EXIT_BAD_INPUT)


def guarded(command):
    """Turn the caller's mistakes (``InputError``) into exit code 2 with a clean message."""
    @functools.wraps(command)
    def wrapper(*args, **kwargs):
        from sensiv.core.errors import InputError, SolverError

        try:
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                result = command(*args, **kwargs)
            _echo_warnings(caught)
            return result
        except InputError as exc:
            _fail(str(exc))
        except SolverError as exc:  # not the caller's mistake: exit 1, but no traceback
            typer.echo(f"error: {exc}", err=True)
            raise typer.Exit(EXIT_SOLVER) from exc
    return wrapper


def _echo_warnings(caught) -> None:
    from sensiv.core.errors import WeakInstrumentWarning

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
FORMAT = typer.Option(None, "--format", help="Figure format: png, pdf or svg; repeat for several [default: png].")


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
    from sensiv.present.report import figure_files, table_files, write_bundle

    write_bundle(out, {**files, **table_files(result), **figure_files(result, formats)})


def spec_from_options(outcome, treatment, instrument, control, cluster, weight, constant):
    from sensiv.data import Spec

    return Spec(outcome=outcome, treatments=tuple(treatment), instruments=tuple(instrument),
                controls=tuple(control or ()), cluster=cluster, weight=weight,
                constant=constant)


def emit(document: dict, text: str, as_json: bool) -> None:
    from sensiv.present.report import to_json

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
    out: Optional[Path] = typer.Option(None, "--out", help="Also write fit.json, fit.md, tables and a figure here."),
    formats: Optional[list[str]] = FORMAT,
) -> None:
    """2SLS with OLS beside it, first stages, Anderson-Rubin set and overidentification test."""
    from sensiv.estimation import iv
    from sensiv.data import from_file
    from sensiv.present.report import fit_markdown, to_json

    chosen = figure_formats(formats)
    spec = spec_from_options(outcome, treatment, instrument, control, cluster, weight, constant)
    iv.check_options(se or ("cluster" if cluster else "robust"), cluster, level)
    result = iv.fit(from_file(data, spec), se=se, confidence_level=level, small=small)
    document = result.to_dict()
    if out is not None:
        write_outputs(out, result, {"fit.json": to_json(document), "fit.md": fit_markdown(result)},
                      chosen)
    emit(document, str(result), as_json)


@app.command()
@guarded
def demo(
    out: Path = typer.Option(Path("sensiv-demo"), "--out", help="Folder for the demo's report, tables, figures and data."),
    formats: Optional[list[str]] = FORMAT,
    figures_dir: Optional[Path] = typer.Option(None, "--figures-dir", help="Also copy the demo's PNG figures here (the repository's figures/ is made this way)."),
    as_json: bool = JSON,
) -> None:
    """Run the main job on built-in INVENTED data: three studies, every analysis, one report."""
    import tempfile

    from sensiv import demo as demo_data
    from sensiv.present.bundle import run_files
    from sensiv.recipes.recipe import parse_recipe, run_recipe
    from sensiv.present.report import results_table, write_bundle
    from sensiv.present.summary import text_table

    chosen = figure_formats(formats)
    with tempfile.TemporaryDirectory() as staging:
        folder = Path(staging)
        (folder / "data").mkdir()
        data_files = {}
        for scenario in (demo_data.irrigation(), demo_data.nudge()):
            content = demo_data.csv_bytes(scenario.frame)
            (folder / "data" / f"{scenario.name}.csv").write_bytes(content)
            data_files[f"data/{scenario.name}.csv"] = content
        (folder / "recipe.toml").write_text(demo_data.demo_recipe("data/"), encoding="utf-8")
        recipe = parse_recipe(folder / "recipe.toml")
        result = run_recipe(recipe)
        files = {**run_files(result, chosen, note="Invented demo data (sensiv.demo)."),
                 **data_files}
    write_bundle(out, files)
    if figures_dir is not None:
        write_bundle(figures_dir, {name.split("/", 1)[1]: data for name, data in files.items()
                                   if name.startswith("figures/") and name.endswith(".png")})
    truth = {"irrigation": demo_data.irrigation().truth["beta"],
             "nudge": demo_data.nudge().truth["beta"]}
    from sensiv.present.bundle import REPORT_CAUTION

    lines = ["sensiv demo: three INVENTED studies (seeded data from sensiv.demo; no real place, "
             "person or study)", "", f"Caution: {REPORT_CAUTION}", ""]
    document = {"invented": True, "out": str(out), "studies": {}}
    for study in recipe.studies:
        runs = [r for r in result.runs if r.study == study.name]
        lines += [f"== {study.name} ==", study.description, ""]
        table = results_table([r.result for r in runs if r.analysis.kind != "calibrate"])
        lines += [text_table(table), ""]
        entry = {"analyses": [{"kind": r.analysis.kind, "label": r.analysis.label,
                               "result": r.result.to_dict()} for r in runs]}
        if study.name in truth:
            beta = truth[study.name]
            covered = {r.analysis.kind: _covers(r.result, beta) for r in runs
                       if _covers(r.result, beta) is not None}
            entry["truth"] = beta
            entry["truth_covered"] = covered
            words = ", ".join(f"{k}: {'covers' if v else 'misses'}" for k, v in covered.items())
            lines += [f"Truth check (possible only because the data are invented): true "
                      f"effect {beta:g}; {words}.", ""]
        document["studies"][study.name] = entry
    lines.append(f"Report: {out}/report.html (and report.md); tables in {out}/tables, figures "
                 f"in {out}/figures, the recipe and data to re-run it in {out}/recipe.toml and "
                 f"{out}/data/ (sensiv run {out}/recipe.toml --out DIR).")
    emit(document, "\n".join(lines), as_json)


def _covers(result, beta: float) -> bool | None:
    """Whether the headline interval of a result contains ``beta`` (None: no interval)."""
    for attribute in ("union_ci", "interval"):
        interval = getattr(result, attribute, None)
        if interval is not None and hasattr(interval, "contains"):
            return bool(interval.contains(beta))
    if hasattr(result, "conf_int") and hasattr(result, "treatments"):
        return bool(result.conf_int(result.treatments[0]).contains(beta))
    return None


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
    out: Optional[Path] = typer.Option(None, "--out", help="Write sweep.json, sweep.md, curve.csv, tables and figures here."),
    formats: Optional[list[str]] = FORMAT,
) -> None:
    """Direct-effect sweep: identified set, union of intervals, breakdown point, robust set."""
    from sensiv.sensitivity import bounds
    from sensiv.estimation import iv
    from sensiv.present.report import sweep_files

    chosen = figure_formats(formats)
    iv.check_options(se or ("cluster" if cluster else "robust"), cluster, level)
    source = _data_options(data, outcome, treatment, instrument, control, cluster, weight,
                           constant)
    result = bounds.sweep(source, direct=direct or None,
                          polytope=str(direct_polytope) if direct_polytope else None, se=se,
                          confidence_level=level, small=small, threshold=threshold,
                          points=points, focus=focus, adaptive=adaptive)
    if out is not None:
        write_outputs(out, result, sweep_files(result), chosen)
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
    threshold: float = typer.Option(0.0, "--threshold", help="Threshold for the prior map: which priors leave an interval that excludes it."),
    as_json: bool = JSON,
    out: Optional[Path] = typer.Option(None, "--out", help="Write prior.json, prior.md, tables and the prior map here."),
    formats: Optional[list[str]] = FORMAT,
) -> None:
    """Interval for the effect when the direct effect follows a prior law."""
    from sensiv.estimation import iv
    from sensiv.sensitivity import prior as prior_layer
    from sensiv.present.report import prior_files

    chosen = figure_formats(formats)
    iv.check_options(se or ("cluster" if cluster else "robust"), cluster, level)
    source = _data_options(data, outcome, treatment, instrument, control, cluster, weight,
                           constant)
    result = prior_layer.prior_analysis(
        source, priors=prior_law or None, prior_file=str(prior_file) if prior_file else None,
        se=se, confidence_level=level, small=small, focus=focus, draws=draws, seed=seed,
        threshold=threshold)
    if out is not None:
        write_outputs(out, result, prior_files(result), chosen)
    emit(result.to_dict(), str(result), as_json)


@app.command()
@guarded
def run(
    recipe: Path = typer.Argument(..., help="Recipe file (TOML): data, roles, analyses."),
    out: Path = typer.Option(..., "--out", help="Folder for report.md, report.html, tables and figures."),
    formats: Optional[list[str]] = FORMAT,
    as_json: bool = JSON,
) -> None:
    """Run every analysis of a recipe and write the report bundle."""
    from sensiv.present.bundle import run_files
    from sensiv.recipes.recipe import parse_recipe, run_recipe
    from sensiv.present.report import write_bundle

    chosen = figure_formats(formats)
    parsed = parse_recipe(recipe)
    result = run_recipe(parsed)
    files = run_files(result, chosen)
    write_bundle(out, files)
    document = {"recipe": str(recipe), "out": str(out), "title": parsed.title,
                "analyses": [{"study": r.study, "kind": r.analysis.kind,
                              "label": r.analysis.label, "result": r.result.to_dict()}
                             for r in result.runs],
                "files": sorted(files)}
    text = [f"{parsed.title}: {len(result.runs)} analyses in {len(parsed.studies)} "
            f"stud{'y' if len(parsed.studies) == 1 else 'ies'}"]
    text += [f"  {r.study} / {r.analysis.label} ({r.analysis.kind})" for r in result.runs]
    text.append(f"Written to {out}/: report.md, report.html, tables/, figures/, results/")
    emit(document, "\n".join(text), as_json)


# Commands of the partial-identification layer live in their own modules and register
# themselves on ``app`` when imported.
from sensiv.cli import calibrate as cli_calibrate, corrbound as cli_corrbound, discrete as cli_discrete, published as cli_published  # noqa: E402,F401


def main() -> None:
    """Console-script entry point."""
    app()

