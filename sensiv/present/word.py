"""The report of a recipe run as a Word document (``report.docx``), from the same blocks as
``report.md`` and ``report.html`` (formatting only, nothing computed).

Headings per study and analysis, the results tables as Word tables, figures embedded, the
assumptions as bullet lists and every caution as its own paragraph.  Uses python-docx, the
optional extra ``sensiv[word]``: :func:`word_available` says whether it is installed.  The
document does not depend on the clock: its core properties carry a fixed date and the zip
entries a fixed time stamp, so the same recipe gives the same bytes.
"""

from __future__ import annotations

import datetime
import importlib.util
import io
import zipfile
from collections.abc import Sequence

from sensiv.present.bundle import Block
from sensiv.present.tables import table_cells

WORD_HINT = ("report.docx was not written: Word output needs python-docx; install it with "
             "pip install 'sensiv[word]' (or pip install python-docx) and run again")
FIXED_DATE = datetime.datetime(2000, 1, 1, tzinfo=datetime.timezone.utc)
ZIP_DATE = (1980, 1, 1, 0, 0, 0)
FIGURE_WIDTH_IN = 6.0
MONOSPACE = "Courier New"
TABLE_STYLE = "Table Grid"
TABLE_FONT_PT = 8


def word_available() -> bool:
    """Whether python-docx is installed (without importing it)."""
    return importlib.util.find_spec("docx") is not None


def render_docx(blocks: Sequence[Block], title: str) -> bytes:
    """The report as the bytes of a ``.docx`` file."""
    import docx

    document = docx.Document()
    properties = document.core_properties
    properties.title = title
    properties.author = "sensiv"
    properties.last_modified_by = "sensiv"
    properties.created = properties.modified = FIXED_DATE
    properties.revision = 1
    for block in blocks:
        _add_block(document, block)
    buffer = io.BytesIO()
    document.save(buffer)
    return _fixed_zip(buffer.getvalue())


def _add_block(document, b: Block) -> None:
    from docx.shared import Inches

    if b.kind == "heading":
        document.add_heading(str(b.content), level=min(max(b.level, 1), 9))
    elif b.kind == "paragraph":
        _add_code_runs(document.add_paragraph(), str(b.content))
    elif b.kind == "list":
        for item in b.content:
            _add_code_runs(document.add_paragraph(style="List Bullet"), str(item))
    elif b.kind == "table":
        _add_table(document, b.content)
    elif b.kind == "figure":
        path, data, caption = b.content
        document.add_picture(io.BytesIO(data), width=Inches(FIGURE_WIDTH_IN))
        if caption:
            document.add_paragraph(caption, style="Caption")
    elif b.kind == "caution":
        paragraph = document.add_paragraph()
        paragraph.add_run("Caution. ").bold = True
        paragraph.add_run(str(b.content))
    elif b.kind == "pre":
        paragraph = document.add_paragraph()
        lines = str(b.content).rstrip().splitlines()
        for i, line in enumerate(lines):
            run = paragraph.add_run(line)
            run.font.name = MONOSPACE
            if i < len(lines) - 1:
                run.add_break()


def _add_code_runs(paragraph, text: str) -> None:
    """``text`` with Markdown-style `code` spans set in a monospace font."""
    for i, part in enumerate(text.split("`")):
        if part:
            run = paragraph.add_run(part)
            if i % 2:
                run.font.name = MONOSPACE


def _add_table(document, table) -> None:
    from docx.shared import Pt

    header, rows = table_cells(table)
    grid = document.add_table(rows=1 + len(rows), cols=len(header))
    grid.style = TABLE_STYLE
    for r, cells in enumerate([header, *rows]):
        for c, text in enumerate(cells):
            cell = grid.cell(r, c)
            cell.text = text
            for paragraph in cell.paragraphs:
                for run in paragraph.runs:
                    run.font.size = Pt(TABLE_FONT_PT)
                    run.bold = r == 0


def _fixed_zip(data: bytes) -> bytes:
    """The same zip with every entry's time stamp fixed (python-docx stamps the clock)."""
    out = io.BytesIO()
    with zipfile.ZipFile(io.BytesIO(data)) as source, \
            zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as target:
        for info in source.infolist():
            fixed = zipfile.ZipInfo(info.filename, date_time=ZIP_DATE)
            fixed.compress_type = zipfile.ZIP_DEFLATED
            fixed.external_attr = info.external_attr
            target.writestr(fixed, source.read(info.filename))
    return out.getvalue()
