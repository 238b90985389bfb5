"""The analysis registry: every analysis kind, found by name or by its result's class.

Adding an analysis = one computing module in its layer + one entry module here (an
:class:`~sensiv.analyses.kind.AnalysisKind`) listed in :data:`KINDS` + its CLI command.
"""

from __future__ import annotations

from sensiv.analyses import (adaptive, calibrate, corrbound, discrete, fit, per_instrument, prior,
                             published, sweep)
from sensiv.analyses.kind import AnalysisKind
from sensiv.core.errors import InputError

# Kinds a recipe can run and a report shows, in the order the documentation lists them.
KINDS: dict[str, AnalysisKind] = {e.name: e for e in (
    fit.ENTRY, sweep.ENTRY, prior.ENTRY, corrbound.ENTRY, discrete.ENTRY, published.ENTRY,
    calibrate.ENTRY, per_instrument.ENTRY)}
# Parts of an analysis that have their own result object (and so their own text).
PARTS: dict[str, AnalysisKind] = {adaptive.ENTRY.name: adaptive.ENTRY}
_BY_TYPE = {e.result_type: e for e in (*KINDS.values(), *PARTS.values())}


def entry(name: str) -> AnalysisKind:
    """The registered kind called ``name`` (a recipe's ``kind``)."""
    try:
        return KINDS[name]
    except KeyError:
        raise InputError(f"analysis kind {name!r} is not known; choose one of "
                         f"{', '.join(KINDS)}") from None


def entry_for(result: object) -> AnalysisKind:
    """The registered kind whose results are of ``result``'s class."""
    try:
        return _BY_TYPE[type(result)]
    except KeyError:
        raise InputError(f"no table or figure for a {type(result).__name__}; give a fit, "
                         "sweep, prior, correlation-bounds, discrete-bounds, published or "
                         "calibration result") from None


def is_tabled(result: object) -> bool:
    """Whether ``result`` is of a kind with table rows and figures."""
    found = _BY_TYPE.get(type(result))
    return found is not None and found.rows is not None


def describe(result: object) -> str:
    """Plain-text summary of ``result`` (the target of :func:`sensiv.core.results.describe`)."""
    return entry_for(result).text(result)
