"""``sensiv run``: a recipe's analyses and the report bundle."""

from __future__ import annotations

from pathlib import Path
from typing import Optional

import typer

from sensiv.cli.app import app, guarded
from sensiv.cli.options import (FORMAT, JSON, check_out, emit, figure_formats, out_option,
                                write_files)


EXAMPLE = ("\b\n"
           "Example (on the invented demo data in examples/):\n"
           "  sensiv run examples/demo.toml --out demo-report")


@app.command(epilog=EXAMPLE)
@guarded
def run(
    recipe: Path = typer.Argument(..., metavar="RECIPE",
        help="Recipe file (TOML): data, roles, analyses."),
    out: Path = out_option("Folder for report.md, report.html, report.docx, tables and figures.", ...),
    formats: Optional[list[str]] = FORMAT,
    as_json: bool = JSON,
) -> None:
    """Run every analysis of a recipe and write the report bundle."""
    check_out(out)
    from sensiv.core import labels
    from sensiv.core.results import labels_of
    from sensiv.recipes.bundle import run_files
    from sensiv.recipes.parse import parse_recipe
    from sensiv.recipes.run import run_recipe

    chosen = figure_formats(formats)
    parsed = parse_recipe(recipe)
    if not formats:  # no --format: the recipe's own `formats` (PNG when it names none)
        chosen = parsed.formats
    result = run_recipe(parsed)
    files = run_files(result, chosen)
    write_files(out, files)
    document = {"recipe": str(recipe), "out": str(out), "title": parsed.title,
                "analyses": [{"study": r.study, "kind": r.analysis.kind,
                              "label": r.analysis.label, "result": r.result.to_dict(),
                              "labels": (labels_of(r.result) or labels.NONE).to_dict()}
                             for r in result.runs],
                "files": sorted(files)}
    text = [f"{parsed.title}: {len(result.runs)} analyses in {len(parsed.studies)} "
            f"stud{'y' if len(parsed.studies) == 1 else 'ies'}"]
    text += [f"  {r.study} / {r.analysis.label} ({r.analysis.kind})" for r in result.runs]
    text += study_tables(parsed, result)
    word = "report.docx" in files
    text.append(f"Written to {out}/: report.md, report.html, "
                f"{'report.docx, ' if word else ''}tables/, figures/, results/")
    if not word:
        from sensiv.present.word import WORD_HINT

        document["notes"] = [WORD_HINT]
        text.append(WORD_HINT)
    emit(document, "\n".join(text), as_json)



def study_tables(parsed, result) -> list[str]:
    """Each study's summary table for the terminal (the analyses that bound the effect), as
    ``sensiv demo`` prints it."""
    from sensiv.analyses.outputs import results_table
    from sensiv.core import labels
    from sensiv.analyses.registry import entry
    from sensiv.present.text import text_table
    from sensiv.present.text_against import HEADING
    from sensiv.recipes.bundle import against_sentences

    lines = []
    for study in parsed.studies:
        shown = [r.result for r in result.runs
                 if r.study == study.name and entry(r.analysis.kind).in_summary]
        if shown:
            with labels.using(study.labels):
                lines += ["", f"== {study.name} ==", text_table(results_table(shown))]
                lines += [f"{HEADING}: {sentence}" for sentence in
                          against_sentences([r for r in result.runs if r.study == study.name])]
    return lines + [""]
