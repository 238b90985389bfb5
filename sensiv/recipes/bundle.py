"""The report bundle of a recipe run: ``run_files`` gathers every table and figure and builds
the report as blocks, which ``sensiv.present.bundle`` renders to ``report.md`` and a
self-contained ``report.html``.  Each analysis's tables and figures are found through the
registry.  Nothing in it depends on the clock: the same recipe and seed give the same bytes.
"""

from __future__ import annotations

from collections.abc import Sequence

from sensiv.core import labels
from sensiv.core.version import __version__
from sensiv.analyses.against import marked_curve
from sensiv.analyses.outputs import figure_files, results_table, summary_figure, table_files
from sensiv.analyses.registry import entry, is_tabled
from sensiv.present import figures
from sensiv.present.bundle import REPORT_CAUTION, Block, render_html, render_markdown
from sensiv.present.captions import SUMMARY_CAPTION, figure_caption
from sensiv.present.text_against import HEADING, against_sentence
from sensiv.sensitivity.against_yardsticks import compare
from sensiv.present.word import render_docx, word_available
from sensiv.present.writer import to_json
from sensiv.sensitivity.bounds import CAUTION


def run_files(run, formats: Sequence[str] = ("png",), note: str | None = None
              ) -> dict[str, str | bytes]:
    """Every file of a recipe run, name → content, ready for ``report.write_bundle``.

    Layout: ``report.md``, ``report.html``, ``report.docx`` (when python-docx is installed:
    the extra ``sensiv[word]``), ``recipe.toml`` (the recipe as run),
    ``results/<study>-<n>-<kind>.json`` (every result in full), ``tables/…`` (Markdown, LaTeX,
    CSV and JSON per analysis and per study) and ``figures/…`` in every requested format.
    """
    formats = tuple(dict.fromkeys(("png", *formats)))  # PNG always: the HTML embeds it
    files: dict[str, str | bytes] = {"recipe.toml": run.recipe.path.read_text(encoding="utf-8")}
    blocks = [Block("heading", run.recipe.title, 1),
              Block("caution", REPORT_CAUTION),
              Block("paragraph", f"Produced by sensiv {__version__} from the recipe "
                                 f"`{run.recipe.path.name}` (copied beside this report)"
                                 + (f" with seed {run.recipe.seed}" if run.recipe.seed is not None
                                    else "") + ".")]
    for study in run.recipe.studies:
        with labels.using(study.labels):
            blocks += _study_blocks(study, [r for r in run.runs if r.study == study.name],
                                    formats, note, files)
    files["report.md"] = render_markdown(blocks)
    files["report.html"] = render_html(blocks, run.recipe.title)
    if word_available():
        files["report.docx"] = render_docx(blocks, run.recipe.title)
    return files


def _study_blocks(study, runs, formats, note, files) -> list[Block]:
    """One study's part of the report (its headline table and figure, the sentence against
    the yardsticks, each analysis); its result files go into ``files``."""
    blocks = [Block("heading", f"Study: {study.name}", 2)]
    if study.description:
        blocks.append(Block("paragraph", study.description))
    effects = [r for r in runs if is_tabled(r.result) and entry(r.analysis.kind).in_summary]
    summarised = set()
    if len(effects) > 1:
        blocks += _summary_blocks(study.name, effects, formats, note, files)
        summarised = {id(r) for r in effects}
    against = comparisons(runs)
    blocks += [Block("paragraph", f"{HEADING}: {against_sentence(c)}")
               for c in against.values()]
    for r in runs:
        blocks += _analysis_blocks(r, formats, note, files, id(r) in summarised,
                                   against.get(id(r)))
        files[f"results/{r.stem}.json"] = to_json(labels.document(r.result.to_dict()))
    return blocks


def comparisons(runs) -> dict:
    """For a study with a sweep and a calibration of the same data: each sweep run (by
    ``id``) → its breakdown set against the first calibration's yardsticks."""
    calibrations = [r.result for r in runs if r.analysis.kind == "calibrate"]
    if not calibrations:
        return {}
    return {id(r): compare(r.result, calibrations[0])
            for r in runs if r.analysis.kind == "sweep"}


def against_sentences(runs) -> list[str]:
    """The sentence of each sweep against the yardsticks (none without a calibration)."""
    return [against_sentence(c) for c in comparisons(runs).values()]


def _summary_blocks(name, effects, formats, note, files) -> list[Block]:
    """A study's headline table (the analyses that bound the effect; calibration rows keep
    their own table in their section) and its summary figure."""
    results = [r.result for r in effects]
    blocks = [Block("table", results_table(results))]
    for file, content in table_files(results, stem=f"{name}-summary").items():
        files[f"tables/{file}"] = content
    drawn = figures.save_figure(summary_figure(results, note=note), formats)
    for fmt, data in drawn.items():
        files[f"figures/{name}-summary-intervals.{fmt}"] = data
    blocks.append(Block("figure", (f"figures/{name}-summary-intervals.png", drawn["png"],
                                   SUMMARY_CAPTION)))
    return blocks


def _analysis_blocks(r, formats, note, files, summarised: bool = False,
                     against=None) -> list[Block]:
    """One analysis's section: assumptions, its table (unless its rows already stand in the
    study's headline table), its figures with captions, notes and its own cautions."""
    result = r.result
    kind = entry(r.analysis.kind)
    label = r.analysis.label
    blocks = [Block("heading", kind.title if label == r.analysis.kind
                    else f"{kind.title}: {label}", 3)]
    assumptions = list(result.assumptions()) if hasattr(result, "assumptions") else []
    if assumptions:
        blocks.append(Block("paragraph", "Assumptions:"))
        blocks.append(Block("list", assumptions))
    cautions = [_caution_of(result)]
    if not is_tabled(result):
        blocks.append(Block("pre", str(result)))
    else:
        table = results_table(result)
        cautions = list(table.cautions)
        if summarised:
            blocks.append(Block("paragraph", "Its rows are in the study's table above."))
        else:
            blocks.append(Block("table", table))
        for name, content in table_files(result, stem=r.stem).items():
            files[f"tables/{name}"] = content
        drawn = figure_files([result], tuple(formats), note=note)
        if against is not None:  # the yardsticks drawn on the curve
            drawn.update(marked_curve(result, against, tuple(formats), note))
        for name, data in drawn.items():
            files[f"figures/{r.stem}-{name.split('-', 1)[1]}"] = data
        for name, data in drawn.items():
            if name.endswith(".png"):
                figure = name.split("-", 1)[1].removesuffix(".png")
                caption = figure_caption(kind.name, figure, result)
                blocks.append(Block("figure", (f"figures/{r.stem}-{figure}.png", data, caption)))
    notes = getattr(result, "notes", ())
    if notes:
        blocks.append(Block("paragraph", "Notes:"))
        blocks.append(Block("list", list(notes)))
    for text in cautions:
        text = text.removeprefix("Caution: ").removeprefix("Caution. ")
        blocks.append(Block("caution", text[:1].upper() + text[1:]))
    return blocks


def _caution_of(result) -> str:
    caution = getattr(result, "caution", None)
    caution = caution() if callable(caution) else caution
    return caution if isinstance(caution, str) else CAUTION
