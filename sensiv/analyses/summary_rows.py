"""The rows, threshold and x-label of the summary figure for a run of several results.

Interim home (the registry will own it): which result contributes which
:class:`~sensiv.present.figures.summary.SummaryItem` rows is a question about analysis kinds,
so it is answered here, above the presentation layer, and the figure only draws rows.  For
each result in order: the 2SLS and Anderson–Rubin rows of the fit it carries (a fit itself, or
a sweep / prior result through ``.fit`` and ``.focus``), then that result's own rows; a row
equal to an earlier one is dropped, so analyses that share one fit show its rows once.  A
calibration bounds no effect of the treatment and adds none.
"""

from __future__ import annotations

from collections.abc import Sequence

from sensiv.core.errors import InputError
from sensiv.estimation.iv import IVFit
from sensiv.partial_id.correlation import CorrelationBounds
from sensiv.partial_id.discrete_results import DiscreteBounds
from sensiv.present.figures import (SummaryItem, correlation_items, discrete_items, fit_items,
                                    prior_items, published_items, sweep_items)
from sensiv.sensitivity.bounds import SweepResult
from sensiv.sensitivity.calibrate import Calibration
from sensiv.sensitivity.prior import PriorResult
from sensiv.sensitivity.published import PublishedResult


def summary_rows(results: Sequence) -> list[SummaryItem]:
    """Rows for :func:`~sensiv.present.figures.summary_intervals` from result objects, in the
    order given.

    Accepts :class:`~sensiv.estimation.iv.IVFit`,
    :class:`~sensiv.sensitivity.bounds.SweepResult`,
    :class:`~sensiv.sensitivity.prior.PriorResult`, correlation bounds, discrete bounds and
    :class:`~sensiv.sensitivity.published.PublishedResult` (its rows labelled "from printed
    numbers").  Each result that carries a fit (a sweep or a prior result carries its fit)
    adds its 2SLS and Anderson–Rubin rows before its own; a row equal to an earlier one is
    left out.  A :class:`~sensiv.sensitivity.calibrate.Calibration` bounds no effect of the
    treatment and adds no row.

    Raises
    ------
    InputError
        For a result of any other kind.
    """
    rows: list[SummaryItem] = []
    for res in results:
        rows += _result_rows(res)
    return list(dict.fromkeys(rows))


def _result_rows(res) -> list[SummaryItem]:
    """The rows of one result: those of the fit it carries, then its own."""
    if isinstance(res, IVFit):
        return fit_items(res, res.treatments[0])
    if isinstance(res, SweepResult):
        return fit_items(res.fit, res.focus) + sweep_items(res)
    if isinstance(res, PriorResult):
        return fit_items(res.fit, res.focus) + prior_items(res)
    if isinstance(res, CorrelationBounds):
        return correlation_items(res)
    if isinstance(res, DiscreteBounds):
        return discrete_items(res)
    if isinstance(res, PublishedResult):
        return published_items(res)
    if isinstance(res, Calibration):
        return []
    raise InputError(f"the summary figure cannot draw a {type(res).__name__}; give fit, "
                     "sweep, prior, correlation-bounds, discrete-bounds, published or "
                     "calibration results")


def summary_threshold(results: Sequence) -> float | None:
    """The threshold of the first result that examines one (sweep, correlation or discrete
    bounds), for the vertical line of the summary figure; None when none does."""
    return next((t for t in map(_threshold_of, results) if t is not None), None)


def summary_xlabel(results: Sequence) -> str:
    """``"effect of FOCUS"`` from the first result that names its focus, else ``"effect"``."""
    return next((f"effect of {name}" for name in map(_focus_name, results) if name), "effect")


def _threshold_of(result) -> float | None:
    breakdown = getattr(result, "breakdown", None)
    value = getattr(breakdown, "threshold", None) if breakdown is not None else None
    if value is None:
        value = getattr(result, "threshold", None)
    return value if isinstance(value, (int, float)) else None


def _focus_name(result) -> str | None:
    for attr in ("focus", "treatment"):
        value = getattr(result, attr, None)
        if isinstance(value, str):
            return value
    table = getattr(result, "table", None)
    if table is not None:
        return table.treatment
    treatments = getattr(result, "treatments", None)
    return treatments[0] if treatments else None
