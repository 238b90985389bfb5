"""What the registry knows of one analysis kind, and what a recipe hands an analysis to run.

An :class:`AnalysisKind` is the one place where a kind of analysis is described: the recipe
keys it accepts and how it runs, the table rows, figures and summary-figure rows it shows, its
plain-text summary.  ``present`` builds each of those from the result's facts; the registry only
names which builder belongs to which kind, so no module switches on result classes.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any


@dataclass(frozen=True, slots=True)
class RunContext:
    """Everything a recipe analysis may use: the study's rows and roles, its inference options
    and the seed.

    ``source`` is the validated data (``None`` for a study of printed numbers only);
    ``frame`` the raw table (for analyses that need columns outside the roles); ``spec`` the
    :class:`~sensiv.data.Spec` of the roles and ``roles`` the study's ``[data]`` table;
    ``common`` the keyword options shared by every data analysis
    (``se``, ``confidence_level``, ``small``); ``study`` the study's name (for messages).
    """

    source: Any
    frame: Any
    spec: Any
    roles: Mapping[str, Any] | None
    common: Mapping[str, Any]
    seed: int | None
    study: str


@dataclass(frozen=True, slots=True)
class AnalysisKind:
    """One analysis kind.

    Attributes
    ----------
    name : str
        The recipe ``kind`` and the stem of its output files (``"sweep"``).
    result_type : type
        The class of its result objects.
    title : str
        Heading of its section in a report.
    table_title : str
        Title of its results table when it is tabulated alone.
    text : callable
        ``text(result) -> str``, the plain-text summary (``str(result)``).
    rows : callable or None
        ``rows(result) -> list[TableRow]``; ``None`` for a part of another analysis that is
        never tabulated alone.
    figures : callable or None
        ``figures(result, note) -> {name: Figure}``, the figures of one result.
    summary_rows : callable or None
        ``summary_rows(result) -> list[SummaryItem]``, its rows in a study's summary figure;
        ``None`` when it bounds no effect of the treatment (it then adds no row).
    fit_of : callable
        ``fit_of(result) -> (IVFit, focus) | None``: the 2SLS fit it carries, whose rows lead
        the summary figure.
    headline : callable
        ``headline(result) -> Interval | None``: the interval a truth check reads.
    options : mapping
        Recipe keys of ``[[study.analysis]]`` and their TOML types.
    run : callable or None
        ``run(context, options) -> result``.
    needs_data : bool
        Whether it needs the study's ``[data]`` table.
    note_heading : str or None
        Heading of its assumptions below a table (``None``: its first row's analysis).
    """

    name: str
    result_type: type
    title: str
    table_title: str
    text: Callable[[Any], str]
    rows: Callable[[Any], list] | None = None
    figures: Callable[[Any, str | None], dict] | None = None
    summary_rows: Callable[[Any], list] | None = None
    fit_of: Callable[[Any], tuple | None] = field(default=lambda result: None)
    headline: Callable[[Any], Any] = field(default=lambda result: None)
    options: Mapping[str, type] = field(default_factory=dict)
    run: Callable[[RunContext, Mapping[str, Any]], Any] | None = None
    needs_data: bool = True
    note_heading: str | None = None

    @property
    def in_summary(self) -> bool:
        """Whether its results are intervals for the effect (drawn in the summary figure)."""
        return self.summary_rows is not None
