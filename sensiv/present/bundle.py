"""The report of a recipe run as blocks, rendered to ``report.md`` and a self-contained
``report.html`` (formatting only, nothing computed).

The report is built once as a list of blocks (headings, paragraphs, lists, tables, figures,
cautions) by :func:`sensiv.recipes.bundle.run_files` and rendered twice, to Markdown and to
HTML, so both say exactly the same thing.  Nothing here depends on the clock.
"""

from __future__ import annotations

import base64
import html
from collections.abc import Sequence
from dataclasses import dataclass

from sensiv.present.tables import markdown_table, table_cells

REPORT_CAUTION = (
    "Every interval below holds only under the assumption stated beside it. Sensitivity "
    "bounds are conditional on the assumed ranges of the exclusion-restriction violation; "
    "they do not establish that an instrument is valid, and a larger violation than assumed "
    "can overturn any conclusion shown here.")


@dataclass(frozen=True, slots=True)
class Block:
    """One element of the report: ``kind`` is heading, paragraph, list, table, figure,
    caution or pre; ``content`` depends on the kind."""

    kind: str
    content: object
    level: int = 0


def render_markdown(blocks: Sequence[Block]) -> str:
    """The report in Markdown (figures linked by relative path)."""
    out = []
    for b in blocks:
        if b.kind == "heading":
            out.append("#" * b.level + " " + str(b.content) + "\n")
        elif b.kind == "paragraph":
            out.append(str(b.content) + "\n")
        elif b.kind == "list":
            out.append("\n".join(f"- {item}" for item in b.content) + "\n")
        elif b.kind == "table":
            header, rows = table_cells(b.content)
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
            header, rows = table_cells(b.content)
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
