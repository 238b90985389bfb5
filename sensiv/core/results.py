"""Small shared result types and JSON helpers.

Every result object in sensiv is a frozen dataclass with ``to_dict()`` returning plain
JSON-ready values.  An infinite interval end is kept as ``inf`` in Python and written as JSON
``null``; it is never replaced by a large number.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from sensiv.core import labels as column_labels


def json_number(value: float | None) -> float | None:
    """Return ``value`` as a JSON-safe float: ``None`` for ±inf, NaN or ``None``."""
    if value is None:
        return None
    value = float(value)
    if math.isinf(value) or math.isnan(value):
        return None
    return 0.0 if value == 0.0 else value  # never -0.0


@dataclass(frozen=True, slots=True)
class Interval:
    """A closed interval ``[low, high]``; either end may be infinite.

    Used for confidence intervals, identified sets and the pieces of a confidence set that is a
    union of intervals.

    Examples
    --------
    >>> Interval(-1.0, float("inf")).to_list()
    [-1.0, None]
    """

    low: float
    high: float

    def __post_init__(self) -> None:
        object.__setattr__(self, "low", float(self.low))
        object.__setattr__(self, "high", float(self.high))
        if self.low > self.high:
            raise ValueError(f"interval low {self.low} exceeds high {self.high}")

    @property
    def bounded(self) -> bool:
        return math.isfinite(self.low) and math.isfinite(self.high)

    @property
    def width(self) -> float:
        return self.high - self.low

    def contains(self, value: float) -> bool:
        return self.low <= value <= self.high

    def to_list(self) -> list[float | None]:
        """``[low, high]`` with JSON ``null`` for an infinite end."""
        return [json_number(self.low), json_number(self.high)]

    def __str__(self) -> str:
        low, high = format_ends(self.low, self.high)
        return f"[{low}, {high}]"


# The number policy (DEVELOPERS.md, "Numbers"): DIGITS significant digits in text, Markdown and
# LaTeX; full precision (repr) in JSON and CSV; a zero never carries a sign; the two ends of an
# interval share one format (format_ends).
DIGITS = 4
# Plain decimals for magnitudes in [SMALL, LARGE); a common power of ten outside.
SMALL, LARGE = 1e-4, 1e6


def format_number(value: float, digits: int = DIGITS) -> str:
    """Readable number: ``-inf``/``inf`` spelled out, otherwise ``digits`` significant digits;
    a value that rounds to zero is ``0`` (never ``-0``).

    Examples
    --------
    >>> format_number(-0.00001, 1), format_number(0.1322891)
    ('-1e-05', '0.1323')
    >>> format_number(-0.0)
    '0'
    """
    if math.isnan(value):
        return "n/a"
    if math.isinf(value):
        return "-inf" if value < 0 else "+inf"
    text = f"{value:.{digits}g}"
    return "0" if float(text) == 0.0 else text


def format_ends(low: float, high: float, digits: int = DIGITS) -> tuple[str, str]:
    """The two ends of an interval in one format: the larger end in magnitude gets ``digits``
    significant digits and the other the same number of decimals (plain decimals between
    :data:`SMALL` and :data:`LARGE`, else a common power of ten), so ``7.043e-05`` never stands
    beside ``0.1227``; infinite ends are spelled out, and zero has no sign.

    Examples
    --------
    >>> format_ends(7.043e-05, 0.1227)
    ('0.0001', '0.1227')
    >>> format_ends(0.5, 1.2)
    ('0.5', '1.2')
    >>> format_ends(-1e-9, -2e-10)
    ('-1e-09', '-2e-10')
    """
    finite = [abs(v) for v in (low, high) if math.isfinite(v)]
    big = max(finite, default=0.0)
    if len(finite) < 2 or not SMALL <= big < LARGE:
        # an infinite end, or both ends tiny or huge: each in its own significant digits
        return format_number(low, digits), format_number(high, digits)
    exponent = math.floor(math.log10(big))
    if float(f"{big:.{max(digits - 1 - exponent, 0)}f}") >= 10.0 ** (exponent + 1):
        exponent += 1                                   # 99.996 rounds up to 100.0
    decimals = max(digits - 1 - exponent, 0)
    ends = [_fixed(low, decimals), _fixed(high, decimals)]
    # the same trailing zeros off both ends: the decimals stay common
    while (any("." in e for e in ends)
           and all(e.endswith("0") for e in ends if "." in e)):
        ends = [e[:-1] if "." in e else e for e in ends]
    ends = [e[:-1] if e.endswith(".") else e for e in ends]
    return ends[0], ends[1]


def with_article(word: str) -> str:
    """``word`` with its indefinite article, for messages about roles ("an instrument",
    "a treatment").

    Examples
    --------
    >>> with_article("instrument"), with_article("control")
    ('an instrument', 'a control')
    """
    return ("an " if word[:1].lower() in "aeiou" else "a ") + word


def _fixed(value: float, decimals: int) -> str:
    text = f"{value:.{decimals}f}"
    return "0" if float(text) == 0.0 else text


def intervals_to_lists(pieces: tuple[Interval, ...]) -> list[list[float | None]]:
    """A union of intervals as a JSON list of ``[low, high]`` pairs."""
    return [piece.to_list() for piece in pieces]


# The one hook from the computing layers to the presentation layer: a result's ``__str__``
# calls :func:`describe`, which looks the result's kind up in the analysis registry (a higher
# layer, imported by name at call time so that no computing module imports a presenting one).
REGISTRY_MODULE = "sensiv.analyses.registry"


def describe(result: object) -> str:
    """Plain-text summary of an analysis result, as printed by the command line.

    Every result dataclass's ``__str__`` returns ``describe(self)``; the text itself is built in
    ``sensiv.present`` from the result's facts, found through the registry entry of its kind.
    """
    import importlib

    with column_labels.using(labels_of(result)):
        return importlib.import_module(REGISTRY_MODULE).describe(result)


# The same hook for notebooks: HTML table, figure and DataFrame of a result, built in the
# presentation layer and found through the registry at call time.
NOTEBOOK_MODULE = "sensiv.analyses.notebook"


class Presentable:
    """Mixin of the analysis results for notebooks.

    ``_repr_html_`` renders the results table in Jupyter, :meth:`plot` returns the matplotlib
    Figure of one of the result's figure kinds and :meth:`to_frame` its curve or table as a
    pandas DataFrame.  Its one slot holds the column labels a front end attached with
    :func:`with_labels` (presentation only: not a field, so equality, ``repr`` and
    ``to_dict()`` ignore it); text, HTML and figures of the result are drawn with them.
    """

    __slots__ = (column_labels.SLOT,)

    def _repr_html_(self) -> str:
        with column_labels.using(labels_of(self)):
            return _notebook().html(self)

    def plot(self, name: str | None = None):
        """The matplotlib Figure ``name`` of this result (its first figure when ``None``)."""
        with column_labels.using(labels_of(self)):
            return _notebook().plot(self, name)

    def to_frame(self):
        """The curve (or, without one, the results table) as a pandas DataFrame."""
        return _notebook().to_frame(self)


def with_labels(result, labels: column_labels.Labels):
    """A shallow copy of the result ``result`` that is presented with ``labels`` (its fields,
    and so its numbers and JSON keys, are the same objects)."""
    import copy

    labelled = copy.copy(result)
    object.__setattr__(labelled, column_labels.SLOT, labels)
    return labelled


def labels_of(result) -> column_labels.Labels | None:
    """The labels attached to ``result`` with :func:`with_labels` (``None``: none attached)."""
    return getattr(result, column_labels.SLOT, None)


def _notebook():
    import importlib

    return importlib.import_module(NOTEBOOK_MODULE)
