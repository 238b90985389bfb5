"""Tables, figures and the summary-figure rows of one result or several, found through the
registry (formatting is ``present``'s; this module only picks each kind's builders)."""

from __future__ import annotations

from collections.abc import Sequence

from sensiv.core import labels
from sensiv.analyses.registry import entry_for, is_tabled
from sensiv.core.errors import InputError
from sensiv.present import figures
from sensiv.present.tables import Table, table_csv, table_json, table_latex, table_markdown

SEVERAL_TITLE = "Sensitivity of the estimate to the exclusion restriction"


def as_list(results) -> list:
    """One result or a non-empty sequence of results, as a list."""
    if isinstance(results, (list, tuple)):
        if not results:
            raise InputError("no results to tabulate; give at least one result")
        return list(results)
    return [results]


def results_table(results, title: str | None = None) -> Table:
    """One table for one result or several (one or more rows each, in the order given)."""
    results = as_list(results)
    rows, notes = [], []
    for res in results:
        kind = entry_for(res)
        new = kind.rows(res)
        rows += new
        notes.append((kind.note_heading or new[0].analysis, tuple(res.assumptions())))
    if title is None:
        title = entry_for(results[0]).table_title if len(results) == 1 else SEVERAL_TITLE
    return Table(title, tuple(rows), tuple(notes))


def table_files(results, stem: str | None = None) -> dict[str, str]:
    """``{stem}-table.md/.tex/.csv/.json`` for one result or several (``stem`` defaults to
    the analysis name, or ``summary`` for several)."""
    items = as_list(results)
    table = results_table(items)
    stem = stem or (entry_for(items[0]).name if len(items) == 1 else "summary")
    return {f"{stem}-table.md": table_markdown(table), f"{stem}-table.tex": table_latex(table),
            f"{stem}-table.csv": table_csv(table), f"{stem}-table.json": table_json(table)}


def summary_rows(results: Sequence) -> list:
    """Rows of a study's summary figure, in the order given: for each result the 2SLS and
    Anderson–Rubin rows of the fit it carries (if any), then its own rows; a row equal to an
    earlier one within ``figures.summary.ROW_TOLERANCE`` is left out, and a kind that bounds
    no effect of the treatment adds none."""
    items: list = []
    for res in results:
        if not is_tabled(res):
            raise InputError(f"the summary figure cannot draw a {type(res).__name__}; give "
                             "fit, sweep, prior, correlation-bounds, discrete-bounds, "
                             "published or calibration results")
        kind = entry_for(res)
        carried = kind.fit_of(res)
        if carried is not None:
            items += figures.fit_items(*carried)
        if kind.summary_rows is not None:
            items += kind.summary_rows(res)
    return figures.distinct_rows(items)


def threshold_of(result) -> float | None:
    """The threshold a result examines (sweep, correlation or discrete bounds), if any."""
    breakdown = getattr(result, "breakdown", None)
    value = getattr(breakdown, "threshold", None) if breakdown is not None else None
    if value is None:
        value = getattr(result, "threshold", None)
    return value if isinstance(value, (int, float)) else None


def focus_name(result) -> str | None:
    """The treatment a result is about (its focus, its treatment or its first treatment)."""
    for attr in ("focus", "treatment"):
        value = getattr(result, attr, None)
        if isinstance(value, str):
            return value
    table = getattr(result, "table", None)
    if table is not None:
        return table.treatment
    treatments = getattr(result, "treatments", None)
    return treatments[0] if treatments else None


def summary_threshold(results: Sequence) -> float | None:
    """The threshold of the first result that examines one, for the summary figure's line."""
    return next((t for t in map(threshold_of, results) if t is not None), None)


def outcome_name(result) -> str:
    """The outcome a result is about (its outcome or its table's; ``"outcome"`` for printed
    numbers)."""
    value = getattr(result, "outcome", None)
    if not isinstance(value, str):
        table = getattr(result, "table", None)
        value = getattr(table, "outcome", None)
    return value if isinstance(value, str) else "outcome"


def summary_xlabel(results: Sequence) -> str:
    """``"effect of FOCUS"`` (with its unit when the labels in force state them) from the first
    result that names its focus, else ``"effect"``."""
    return next((labels.axis_label("", name, outcome_name(res))
                 for res, name in zip(results, map(focus_name, results)) if name), "effect")


def summary_figure(results: Sequence, note: str | None = None):
    """A study's summary figure: every result as one interval (or several) under its own
    assumption, with the threshold of the first result that examines one and the effect of
    the first treatment named as the axis."""
    return figures.summary_intervals(summary_rows(results), threshold=summary_threshold(results),
                                     xlabel=summary_xlabel(results), note=note)


def figure_files(results, formats=("png",), *, note: str | None = None) -> dict[str, bytes]:
    """Every figure of one result or several as ``{stem}-{figure}.{format}`` → bytes, plus
    ``summary-intervals.*`` for several.

    Stems: ``sweep-curve``/``-frontier``, ``prior-map``, ``corrbound-curve``,
    ``discrete-curve``, ``fit-summary``, ``published-curve``/``-frontier`` and
    ``calibrate-yardsticks`` (a second result of a kind gets ``sweep2-…`` and so on).  A
    calibration bounds no effect of the treatment, so it adds no row to the summary figure.
    ``note`` is added to every caption (e.g. "Invented demo data").  The same results give
    the same bytes.
    """
    items = as_list(results)
    files: dict[str, bytes] = {}
    seen: dict[str, int] = {}
    for res in items:
        kind = entry_for(res)
        seen[kind.name] = seen.get(kind.name, 0) + 1
        stem = kind.name if seen[kind.name] == 1 else f"{kind.name}{seen[kind.name]}"
        for name, fig in kind.figures(res, note).items():
            for fmt, data in figures.save_figure(fig, formats).items():
                files[f"{stem}-{name}.{fmt}"] = data
    effects = [res for res in items if entry_for(res).in_summary]
    if len(items) > 1 and effects:
        fig = summary_figure(effects, note=note)
        for fmt, data in figures.save_figure(fig, formats).items():
            files[f"summary-intervals.{fmt}"] = data
    return files
