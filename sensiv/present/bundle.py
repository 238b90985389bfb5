"""The report bundle of a recipe run: every table and figure, ``report.md`` and a
self-contained ``report.html`` (part of the report layer: formatting only, nothing computed).

The report is built once as a list of blocks (headings, paragraphs, lists, tables, figures,
cautions) and rendered twice, to Markdown and to HTML, so both say exactly the same thing.
Nothing in it depends on the clock: the same recipe and seed give the same bytes.
"""

from __future__ import annotations

import base64
import html
from collections.abc import Sequence
from dataclasses import dataclass

from sensiv import __version__
from sensiv.sensitivity.bounds import CAUTION

REPORT_CAUTION = (
    "Every interval below holds only under the assumption stated beside it. Sensitivity "
    "bounds are conditional on the assumed ranges of the exclusion-restriction violation; "
    "they do not establish that an instrument is valid, and a larger violation than assumed "
    "can overturn any conclusion shown here.")
# Kinds whose results are intervals for the effect (drawn in the study's summary figure).
INTERVAL_KINDS = ("fit", "sweep", "prior", "corrbound", "discrete", "published")
KIND_TITLES = {"fit": "2SLS with diagnostics", "sweep": "Direct-effect sweep",
               "prior": "Prior interval", "corrbound": "Correlation-restriction bounds",
               "discrete": "Discrete bounds with an exclusion budget",
               "published": "Stress test of printed numbers",
               "calibrate": "Calibrating a plausible violation"}


@dataclass(frozen=True, slots=True)
class Block:
    """One element of the report: ``kind`` is heading, paragraph, list, table, figure,
    caution or pre; ``content`` depends on the kind."""

    kind: str
    content: object
    level: int = 0


def _kind(result) -> str | None:
    from sensiv.core.errors import InputError
    from sensiv.present.report import _kind as table_kind

    try:
        return table_kind(result)
    except InputError:  # not a table/figure kind: shown as its text summary
        return None


def _figure_files(results: Sequence, formats: Sequence[str], note: str | None
                  ) -> dict[str, bytes]:
    from sensiv.present.report import figure_files

    return figure_files(list(results), tuple(formats), note=note)


def _summary_figure(results: Sequence, formats: Sequence[str], note: str | None
                    ) -> dict[str, bytes]:
    from sensiv.analyses.summary_rows import summary_rows, summary_threshold, summary_xlabel
    from sensiv.present import figures

    results = list(results)
    return figures.save_figure(figures.summary_intervals(
        summary_rows(results), threshold=summary_threshold(results),
        xlabel=summary_xlabel(results), note=note), formats)


def run_files(run, formats: Sequence[str] = ("png",), note: str | None = None
              ) -> dict[str, str | bytes]:
    """Every file of a recipe run, name → content, ready for ``report.write_bundle``.

    Layout: ``report.md``, ``report.html``, ``recipe.toml`` (the recipe as run),
    ``results/<study>-<n>-<kind>.json`` (every result in full), ``tables/…`` (Markdown, LaTeX,
    CSV and JSON per analysis and per study) and ``figures/…`` in every requested format.
    """
    from sensiv.present.report import results_table, table_files, to_json

    formats = tuple(dict.fromkeys(("png", *formats)))  # PNG always: the HTML embeds it
    files: dict[str, str | bytes] = {"recipe.toml": run.recipe.path.read_text(encoding="utf-8")}
    blocks = [Block("heading", run.recipe.title, 1),
              Block("caution", REPORT_CAUTION),
              Block("paragraph", f"Produced by sensiv {__version__} from the recipe "
                                 f"`{run.recipe.path.name}` (copied beside this report)"
                                 + (f" with seed {run.recipe.seed}" if run.recipe.seed is not None
                                    else "") + ".")]
    for study in run.recipe.studies:
        runs = [r for r in run.runs if r.study == study.name]
        blocks.append(Block("heading", f"Study: {study.name}", 2))
        if study.description:
            blocks.append(Block("paragraph", study.description))
        tabled = [r for r in runs if _kind(r.result) is not None]
        if sum(_kind(r.result) in INTERVAL_KINDS for r in tabled) > 1:
            summary = results_table([r.result for r in tabled])
            blocks.append(Block("table", summary))
            for name, content in table_files([r.result for r in tabled],
                                             stem=f"{study.name}-summary").items():
                files[f"tables/{name}"] = content
            summary_figures = _summary_figure([r.result for r in tabled
                                               if _kind(r.result) in INTERVAL_KINDS],
                                              formats, note)
            for fmt, data in summary_figures.items():
                files[f"figures/{study.name}-summary-intervals.{fmt}"] = data
            blocks.append(Block("figure", (f"figures/{study.name}-summary-intervals.png",
                                           summary_figures["png"],
                                           "Every analysis of this study as one interval, "
                                           "each under its own assumption.")))
        for r in runs:
            blocks += _analysis_blocks(r, formats, note, files)
            files[f"results/{r.stem}.json"] = to_json(r.result.to_dict())
    files["report.md"] = render_markdown(blocks)
    files["report.html"] = render_html(blocks, run.recipe.title)
    return files


def _analysis_blocks(r, formats, note, files) -> list[Block]:
    from sensiv.present.report import results_table, table_files

    result = r.result
    title = KIND_TITLES.get(r.analysis.kind, r.analysis.kind)
    label = r.analysis.label
    blocks = [Block("heading", title if label == r.analysis.kind else f"{title}: {label}", 3)]
    assumptions = list(result.assumptions()) if hasattr(result, "assumptions") else []
    if assumptions:
        blocks.append(Block("paragraph", "Assumptions:"))
        blocks.append(Block("list", assumptions))
    kind = _kind(result)
    if kind is None:
        blocks.append(Block("pre", str(result)))
    else:
        table = results_table(result)
        blocks.append(Block("table", table))
        for name, content in table_files(result, stem=r.stem).items():
            files[f"tables/{name}"] = content
        figures = _figure_files([result], formats, note)
        for name, data in figures.items():
            files[f"figures/{r.stem}-{name.split('-', 1)[1]}"] = data
        for name, data in figures.items():
            if name.endswith(".png"):
                path = f"figures/{r.stem}-{name.split('-', 1)[1]}"
                blocks.append(Block("figure", (path, data, "")))
    notes = getattr(result, "notes", ())
    if notes:
        blocks.append(Block("paragraph", "Notes:"))
        blocks.append(Block("list", list(notes)))
    caution = getattr(result, "caution", None)
    caution = caution() if callable(caution) else caution
    text = caution if isinstance(caution, str) else CAUTION
    text = text.removeprefix("Caution: ").removeprefix("Caution. ")
    blocks.append(Block("caution", text[:1].upper() + text[1:]))
    return blocks


# ----------------------------------------------------------------------------- renderers
def _table_cells(table) -> tuple[list[str], list[list[str]]]:
    from sensiv.present.report import _cells

    return _cells(table)


def render_markdown(blocks: Sequence[Block]) -> str:
    """The report in Markdown (figures linked by relative path)."""
    from sensiv.present.report import markdown_table

    out = []
    for b in blocks:
        if b.kind == "heading":
            out.append("#" * b.level + " " + str(b.content) + "\n")
        elif b.kind == "paragraph":
            out.append(str(b.content) + "\n")
        elif b.kind == "list":
            out.append("\n".join(f"- {item}" for item in b.content) + "\n")
        elif b.kind == "table":
            header, rows = _table_cells(b.content)
            out.append(markdown_table(header, rows))
        elif b.kind == "figure":
            path, _, caption = b.content
            out.append(f"![{caption or path}]({path})\n")
        elif b.kind == "caution":
            out.append(f"> **Caution.** {b.content}\n")
        elif b.kind == "pre":
            out.append("```text\n" + str(b.content).rstrip() + "\n```\n")
    return "\n".join(out)


_STYLE = """
body { font-family: Georgia, 'DejaVu Serif', serif; max-width: 60rem; margin: 2rem auto;
       padding: 0 1rem; color: #1a1a1a; line-height: 1.45; }
h1, h2, h3 { font-family: 'DejaVu Sans', Helvetica, Arial, sans-serif; }
h2 { border-bottom: 1px solid #ccc; padding-bottom: .2rem; margin-top: 2.2rem; }
table { border-collapse: collapse; font-size: .85rem; margin: .8rem 0; }
th, td { border-top: 1px solid #bbb; border-bottom: 1px solid #bbb; padding: .3rem .5rem;
         vertical-align: top; text-align: left; }
th { background: #f0f4f9; }
.caution { border-left: 4px solid #C4570B; background: #fbf1e8; padding: .5rem .8rem; }
figure { margin: 1rem 0; } figure img { max-width: 28rem; width: 100%; }
figcaption { font-size: .85rem; color: #555; }
pre { background: #f6f6f6; padding: .6rem; overflow-x: auto; font-size: .8rem; }
"""


def _inline_code(escaped: str) -> str:
    """Markdown-style `code` spans as <code> (the text is already HTML-escaped)."""
    import re

    return re.sub(r"`([^`]+)`", r"<code>\1</code>", escaped)


def render_html(blocks: Sequence[Block], title: str) -> str:
    """A self-contained HTML page: styles inline, figures embedded as base64 PNG."""
    e = html.escape
    body = []
    for b in blocks:
        if b.kind == "heading":
            body.append(f"<h{b.level}>{e(str(b.content))}</h{b.level}>")
        elif b.kind == "paragraph":
            body.append(f"<p>{_inline_code(e(str(b.content)))}</p>")
        elif b.kind == "list":
            body.append("<ul>" + "".join(f"<li>{e(str(i))}</li>" for i in b.content) + "</ul>")
        elif b.kind == "table":
            header, rows = _table_cells(b.content)
            head = "".join(f"<th>{e(h)}</th>" for h in header)
            cells = "".join("<tr>" + "".join(f"<td>{e(c)}</td>" for c in row) + "</tr>"
                            for row in rows)
            body.append(f"<table><thead><tr>{head}</tr></thead><tbody>{cells}</tbody></table>")
        elif b.kind == "figure":
            path, data, caption = b.content
            encoded = base64.b64encode(data).decode("ascii")
            body.append(f'<figure><img alt="{e(caption or path)}" '
                        f'src="data:image/png;base64,{encoded}">'
                        + (f"<figcaption>{e(caption)}</figcaption>" if caption else "")
                        + "</figure>")
        elif b.kind == "caution":
            body.append(f'<p class="caution"><strong>Caution.</strong> {e(str(b.content))}</p>')
        elif b.kind == "pre":
            body.append(f"<pre>{e(str(b.content))}</pre>")
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            f"<title>{e(title)}</title>\n<style>{_STYLE}</style>\n</head>\n<body>\n"
            + "\n".join(body) + "\n</body>\n</html>\n")
