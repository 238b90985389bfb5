"""A result in a notebook, found through the registry: its HTML table (``_repr_html_``), the
matplotlib Figure of one of its figure kinds (``plot``) and its curve or table as a DataFrame
(``to_frame``).

Results sit in layers below this one; they reach these functions through the run-time hook of
:mod:`sensiv.core.results` (:data:`~sensiv.core.results.NOTEBOOK_MODULE`), as their
``__str__`` reaches :func:`sensiv.analyses.registry.describe`.
"""

from __future__ import annotations

from sensiv.analyses.outputs import results_table
from sensiv.analyses.registry import entry_for
from sensiv.core.errors import InputError
from sensiv.present.notebook import curve_frame, table_frame, table_html, text_html


def html(result: object) -> str:
    """The result's table as HTML (its text summary, preformatted, for a kind without rows)."""
    kind = entry_for(result)
    if kind.rows is None:
        return text_html(kind.text(result))
    return table_html(results_table(result))


def plot(result: object, name: str | None = None):
    """The matplotlib Figure called ``name`` among the result's figures (its first when
    ``None``): ``"curve"``, ``"frontier"``, ``"map"``, ``"summary"``, ``"yardsticks"`` … as
    in the figure files ``{kind}-{name}.png``."""
    kind = entry_for(result)
    drawn = kind.figures(result, None) if kind.figures is not None else {}
    if not drawn:
        raise InputError(f"a {type(result).__name__} has no figure; print it or use "
                         "to_frame() instead")
    if name is None:
        return next(iter(drawn.values()))
    if name not in drawn:
        raise InputError(f"plot(name={name!r}): this {kind.name} result has the figures "
                         f"{', '.join(map(repr, drawn))}; pick one of them")
    return drawn[name]


def to_frame(result: object):
    """The result's curve as a pandas DataFrame when it has one (sweep, published, corrbound,
    discrete), otherwise its results table (one row per reported set)."""
    curve = getattr(result, "curve", None)
    if curve is not None:
        return curve_frame(curve)
    kind = entry_for(result)
    if kind.rows is None:
        raise InputError(f"a {type(result).__name__} has no curve or table; use to_dict()")
    return table_frame(results_table(result))
