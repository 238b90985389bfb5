"""Results tables: rows (one per analysis, or per reported set of it) and their renderers.

A :class:`Table` holds :class:`TableRow` objects — the assumption, the estimate or bounds,
the interval, the breakdown value, n and the covariance — that :func:`table_markdown`,
:func:`table_latex` (booktabs), :func:`table_csv` and :func:`table_json` render.  Every number
is read from a result object; nothing here computes anything new.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from sensiv.core.results import (Interval, format_ends, format_number, intervals_to_lists,
                                 json_number)
from sensiv.present.writer import to_json


def markdown_table(header: list[str], rows: list[list[str]]) -> str:
    """A GitHub-flavoured Markdown table with escaped pipes."""
    def cell(text: str) -> str:
        return str(text).replace("|", "\\|")

    lines = ["| " + " | ".join(cell(h) for h in header) + " |",
             "|" + "|".join("---" for _ in header) + "|"]
    lines += ["| " + " | ".join(cell(c) for c in r) + " |" for r in rows]
    return "\n".join(lines) + "\n"


# ============================================================================ result tables
# One row per analysis (or per reported set of it): the assumption, the estimate or bounds, the
# interval, the breakdown value, n and the covariance.  Every number is read from a result
# object; the renderers below only format it (Markdown, LaTeX with booktabs, CSV, JSON).
@dataclass(frozen=True, slots=True)
class TableRow:
    """One analysis in a results table.

    ``bounds`` is an identified set or bounds as disjoint pieces (``None``: not applicable,
    ``()``: empty); ``interval`` a confidence or prior interval (``None``: not available);
    either may have infinite ends.  ``breakdown`` is the breakdown value in the unit that
    ``breakdown_text`` names.  ``n`` is ``None`` when the source does not give it (a published
    table).  Calibration rows also read the estimate (a direct effect) as a share of the
    reduced form (``share_rf``) and in SD units (``sd_units``), and carry the options they
    suggest for ``sweep`` or ``prior`` (``suggestion``).
    """

    analysis: str
    assumption: str
    estimate: float | None
    se: float | None
    bounds: tuple[Interval, ...] | None
    interval: tuple[Interval, ...] | None
    confidence_level: float
    breakdown: float | None
    breakdown_text: str
    n: int | None
    covariance: str
    caution: str
    share_rf: float | None = None
    sd_units: float | None = None
    suggestion: str | None = None
    breakdown_units: object | None = None   # a DirectUnits: the breakdown as direct effects


@dataclass(frozen=True, slots=True)
class Table:
    """Rows plus the full assumptions of each analysis (``notes``: heading → lines)."""

    title: str
    rows: tuple[TableRow, ...]
    notes: tuple[tuple[str, tuple[str, ...]], ...]

    @property
    def cautions(self) -> tuple[str, ...]:
        return tuple(dict.fromkeys(r.caution for r in self.rows))


COLUMNS = ("analysis", "assumption", "estimate or bounds", "interval", "breakdown", "n",
           "covariance")


CSV_COLUMNS = ("analysis", "assumption", "estimate", "se", "bounds_lower", "bounds_upper",
               "bounds_pieces", "interval_lower", "interval_upper", "interval_pieces",
               "confidence_level", "breakdown", "breakdown_meaning", "n", "covariance",
               "caution", "share_of_reduced_form", "sd_units", "suggestion",
               "breakdown_direct", "breakdown_direct_rf", "breakdown_direct_sd")


NONE_TEXT = "—"


# ----------------------------------------------------------------------------- cell text
def end_text(value: float) -> str:
    if math.isinf(value):
        return "−∞" if value < 0 else "+∞"
    return format_number(value).replace("-", "−")


def interval_text(low: float, high: float) -> str:
    """``[low, high]`` for a table cell: both ends in one format
    (:func:`sensiv.core.results.format_ends`), a true minus sign, ``±∞`` for infinite ends."""
    ends = []
    for value, text in zip((low, high), format_ends(low, high)):
        ends.append(end_text(value) if math.isinf(value) else text.replace("-", "−"))
    return f"[{ends[0]}, {ends[1]}]"


def _pieces_text(pieces) -> str:
    if pieces is None:
        return NONE_TEXT
    if not pieces:
        return "empty"
    return " ∪ ".join(interval_text(p.low, p.high) for p in pieces)


def _estimate_text(row: TableRow) -> str:
    if row.bounds is not None:
        return _pieces_text(row.bounds)
    if row.estimate is None:
        return NONE_TEXT
    text = end_text(row.estimate)
    text += f" ({end_text(row.se)})" if row.se is not None else ""
    units = [f"share of reduced form {end_text(row.share_rf)}" if row.share_rf is not None
             else None, f"SD units {end_text(row.sd_units)}" if row.sd_units is not None else None]
    units = [u for u in units if u]
    return text + (f"; {'; '.join(units)}" if units else "")


def table_cells(table: Table) -> tuple[list[str], list[list[str]]]:
    levels = {r.confidence_level for r in table.rows}
    pct = f"{100 * levels.pop():g}% interval" if len(levels) == 1 else None
    header = ["Analysis", "Assumption", "Estimate (se) or bounds", pct or "Interval (level)",
              "Breakdown", "n", "Covariance"]
    body = []
    for r in table.rows:
        interval = _pieces_text(r.interval)
        if pct is None and r.interval is not None:
            interval = f"{100 * r.confidence_level:g}%: {interval}"
        assumption = r.assumption + (f"; suggested: {r.suggestion}" if r.suggestion else "")
        body.append([r.analysis, assumption, _estimate_text(r), interval, r.breakdown_text,
                     NONE_TEXT if r.n is None else str(r.n), r.covariance])
    return header, body


# ----------------------------------------------------------------------------- renderers
def table_markdown(table: Table) -> str:
    """The table in Markdown, with each analysis's assumptions and the caution below it."""
    header, body = table_cells(table)
    parts = [f"## {table.title}\n\n", markdown_table(header, body), "\n"]
    for heading, lines in table.notes:
        parts.append(f"**Assumptions — {heading}:**\n\n" + "".join(f"- {a}\n" for a in lines)
                     + "\n")
    parts += [f"> {c}\n>\n" for c in table.cautions[:-1]]
    parts.append(f"> {table.cautions[-1]}\n")
    return "".join(parts)


_LATEX_TEXT = {
    "\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#", "_": r"\_",
    "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}", "^": r"\textasciicircum{}",
    "–": "--", "—": "---", "′": "'",
}


_LATEX_MATH = {
    "|": "|", "<": "<", ">": ">", "γ": r"\gamma", "β": r"\beta", "θ": r"\theta",
    "ε": r"\varepsilon", "≤": r"\le", "≥": r"\ge", "∈": r"\in", "−": "-", "∪": r"\cup",
    "±": r"\pm", "×": r"\times", "·": r"\cdot", "∞": r"\infty", "²": "^2", "→": r"\to",
    "r\u0304": r"\bar{r}",
}


def latex_escape(text: str) -> str:
    r"""Text safe inside a LaTeX table cell: special characters escaped, Greek letters and
    symbols set as math (neighbouring symbols share one ``$…$``).

    Examples
    --------
    >>> print(latex_escape("height_m & 5% ≤ ε, |corr| ≤ r̄·2"))
    height\_m \& 5\% $\le$ $\varepsilon$, $|$corr$|$ $\le$ $\bar{r} \cdot$2

    A typed option keeps both hyphens (``--`` would become an en dash):

    >>> print(latex_escape("--direct=-0.1:0.1"))
    -{}-direct=-0.1:0.1
    """
    out: list[str] = []
    math_run: list[str] = []
    i = 0
    while i < len(text):
        pair = text[i:i + 2]
        if pair in _LATEX_MATH:
            math_run.append(_LATEX_MATH[pair])
            i += 2
            continue
        ch = text[i]
        if ch in _LATEX_MATH:
            math_run.append(_LATEX_MATH[ch])
        else:
            if math_run:
                out.append("$" + " ".join(math_run) + "$")
                math_run = []
            out.append("-{}" if text[i:i + 2] == "--" else _LATEX_TEXT.get(ch, ch))
        i += 1
    if math_run:
        out.append("$" + " ".join(math_run) + "$")
    return "".join(out)


LATEX_COLUMNS = (r">{\raggedright\arraybackslash}p{0.15\linewidth}"
                 r">{\raggedright\arraybackslash}p{0.22\linewidth}ll"
                 r">{\raggedright\arraybackslash}p{0.13\linewidth}r"
                 r">{\raggedright\arraybackslash}p{0.09\linewidth}")


def table_latex(table: Table) -> str:
    """The table as a booktabs ``tabular`` ready to ``\\input`` (needs the booktabs and
    array packages), followed by each caution as its own small paragraph."""
    header, body = table_cells(table)
    lines = [f"% {latex_escape(table.title)} (written by sensiv; regenerate rather than edit)",
             r"% needs \usepackage{booktabs} and \usepackage{array}",
             r"\begin{tabular}{" + LATEX_COLUMNS + "}", r"\toprule",
             " & ".join(latex_escape(h) for h in header) + r" \\", r"\midrule"]
    lines += [" & ".join(latex_escape(c) for c in row) + r" \\" for row in body]
    lines += [r"\bottomrule", r"\end{tabular}", r"\par\smallskip"]
    # each analysis's caution as its own small paragraph, never run together
    lines += [r"{\footnotesize " + latex_escape(c) + r"\par}" for c in table.cautions]
    return "\n".join(lines) + "\n"


def _csv_number(value: float | None) -> str:
    if value is None:
        return ""
    if math.isinf(value):
        return "-inf" if value < 0 else "inf"
    return repr(float(value))


def _hull(pieces) -> tuple[float | None, float | None]:
    if not pieces:
        return None, None
    return pieces[0].low, pieces[-1].high


def _ascii_pieces(pieces) -> str:
    if pieces is None:
        return ""
    if not pieces:
        return "empty"
    return " U ".join(f"[{_csv_number(p.low)}, {_csv_number(p.high)}]" for p in pieces)


def _csv_units(units) -> list[str]:
    """The breakdown direct effect in outcome, reduced-form and SD units: a number with one
    instrument, ``name=number`` pairs joined by ``;`` with several, empty when there is none."""
    if units is None:
        return ["", "", ""]
    names = units.instruments
    def cell(values) -> str:
        if len(names) == 1:
            return _csv_number(values[0])
        return ";".join(f"{z}={_csv_number(v)}" for z, v in zip(names, values))
    return [cell(units.outcome), cell(units.rf), cell(units.sd)]


def table_csv(table: Table) -> str:
    """One line per row with machine-readable numbers (``inf`` for an unbounded end, empty
    for not available; unions of intervals in full in the ``*_pieces`` columns)."""
    import csv
    import io

    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(CSV_COLUMNS)
    for r in table.rows:
        b_lo, b_hi = _hull(r.bounds)
        i_lo, i_hi = _hull(r.interval)
        writer.writerow([r.analysis, r.assumption, _csv_number(r.estimate), _csv_number(r.se),
                         _csv_number(b_lo), _csv_number(b_hi), _ascii_pieces(r.bounds),
                         _csv_number(i_lo), _csv_number(i_hi), _ascii_pieces(r.interval),
                         repr(r.confidence_level), _csv_number(r.breakdown),
                         "" if r.breakdown_text == NONE_TEXT else r.breakdown_text,
                         "" if r.n is None else r.n, r.covariance, r.caution,
                         _csv_number(r.share_rf), _csv_number(r.sd_units), r.suggestion or "",
                         *_csv_units(r.breakdown_units)])
    return buffer.getvalue()


def table_json(table: Table) -> str:
    """The table as one JSON document (``null`` for an infinite end or a missing value;
    ``bounds``/``interval`` as lists of ``[low, high]`` pieces, ``null`` when not
    applicable; ``share_of_reduced_form``, ``sd_units`` and ``suggestion`` filled on
    calibration rows only)."""
    def pieces(p):
        return None if p is None else intervals_to_lists(tuple(p))

    rows = [{"analysis": r.analysis, "assumption": r.assumption,
             "estimate": json_number(r.estimate), "se": json_number(r.se),
             "bounds": pieces(r.bounds), "interval": pieces(r.interval),
             "confidence_level": r.confidence_level, "breakdown": json_number(r.breakdown),
             "breakdown_meaning": None if r.breakdown_text == NONE_TEXT else r.breakdown_text,
             "n": r.n, "covariance": r.covariance,
             "caution": r.caution, "share_of_reduced_form": json_number(r.share_rf),
             "sd_units": json_number(r.sd_units), "suggestion": r.suggestion,
             "breakdown_direct_units": (r.breakdown_units.to_dict()
                                        if r.breakdown_units is not None else None)}
            for r in table.rows]
    return to_json({"title": table.title, "rows": rows,
                    "assumptions": {h: list(lines) for h, lines in table.notes},
                    "caution": list(table.cautions)})
