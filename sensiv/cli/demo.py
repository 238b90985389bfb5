"""``sensiv demo``: the main job on built-in INVENTED data (three studies, one report)."""

from __future__ import annotations

from pathlib import Path
from typing import Optional

from sensiv.cli.app import app, guarded
from sensiv.cli.options import (FORMAT, JSON, check_out, emit, figure_formats, out_option,
                                write_files)


# The README of a --figures-dir folder (the repository's figures/ is written this way, whole).
FIGURES_README = """# Figures of the demo (invented data)

These PNG files are the figures of `sensiv demo` on its three **invented** studies
(`examples/demo.toml`). Regenerate them with

```bash
sensiv demo --out sensiv-demo --figures-dir figures
```
"""

EXAMPLE = ("\b\n"
           "Example (on the invented demo data in examples/):\n"
           "  sensiv demo --out sensiv-demo")


@app.command(epilog=EXAMPLE)
@guarded
def demo(
    out: Path = out_option("Folder for the demo's report, tables, figures and data.", Path("sensiv-demo")),
    formats: Optional[list[str]] = FORMAT,
    figures_dir: Optional[Path] = out_option("Also copy the demo's PNG figures here (the repository's figures/ is made this way).", None, "--figures-dir"),
    as_json: bool = JSON,
) -> None:
    """Run the main job on built-in INVENTED data: three studies, every analysis, one report."""
    check_out(out)
    check_out(figures_dir, "--figures-dir")
    _check_distinct(out, figures_dir)
    import tempfile

    from sensiv import demo as demo_data
    from sensiv.analyses.outputs import results_table
    from sensiv.core import labels
    from sensiv.present.text import text_table
    from sensiv.present.text_against import HEADING
    from sensiv.recipes.bundle import against_sentences
    from sensiv.recipes.bundle import run_files
    from sensiv.recipes.parse import parse_recipe
    from sensiv.recipes.run import run_recipe

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
    write_files(out, files)
    if figures_dir is not None:
        pngs = {name.split("/", 1)[1]: data for name, data in files.items()
                if name.startswith("figures/") and name.endswith(".png")}
        write_files(figures_dir, {**pngs, "README.md": FIGURES_README}, "--figures-dir")
    truth = {"irrigation": demo_data.irrigation().truth["beta"],
             "nudge": demo_data.nudge().truth["beta"]}
    from sensiv.present.bundle import REPORT_CAUTION

    lines = ["sensiv demo: three INVENTED studies (seeded data from sensiv.demo; no real place, "
             "person or study)", "", f"Caution: {REPORT_CAUTION}", ""]
    document = {"invented": True, "out": str(out), "studies": {}}
    for study in recipe.studies:
        runs = [r for r in result.runs if r.study == study.name]
        lines += [f"== {study.name} ==", study.description, ""]
        with labels.using(study.labels):  # the invented scenarios' own labels
            lines += [text_table(results_table([r.result for r in runs
                                                if r.analysis.kind != "calibrate"])), ""]
            lines += [f"{HEADING}: {sentence}" for sentence in against_sentences(runs)]
        lines += [""] if lines[-1] else []
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


def _check_distinct(out: Path, figures_dir: Optional[Path]) -> None:
    """Two bundles, each published whole: neither folder may be the other or inside it."""
    import os

    from sensiv.core.errors import InputError

    if figures_dir is None:
        return
    a, b = (Path(os.path.realpath(os.path.abspath(p))) for p in (out, figures_dir))
    if a == b or a in b.parents or b in a.parents:
        raise InputError(f"--figures-dir '{figures_dir}' and --out '{out}' overlap; each is "
                         "written whole as its own bundle, so give two separate folders")


def _covers(result, beta: float) -> bool | None:
    """Whether the headline interval of a result contains ``beta`` (None: no interval)."""
    from sensiv.analyses.registry import entry_for

    interval = entry_for(result).headline(result)
    return None if interval is None else bool(interval.contains(beta))
