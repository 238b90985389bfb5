r"""Direct-effect sets for a per-instrument table: one range for every instrument, or a polytope.

With per-instrument associations (:mod:`sensiv.sensitivity.associations`) the direct effect
``α_j`` of instrument *j* on the outcome enters ``b_{y,j} = β b_{x,j} + α_j``.  The set Γ of
allowed ``α`` is

* a **box** ``α_j ∈ [l_j, u_j]`` from one ``LOW:HIGH`` range applied to every instrument, read
  in one of three units (suffix): none — outcome units, ``l_j = LOW``; ``se`` — multiples of
  the instrument's reduced-form SE, ``l_j = LOW·s_{y,j}``; ``rf`` — a share of its reduced
  form, ``α_j = λ b_{y,j}`` with ``λ ∈ [LOW, HIGH]`` (the ends re-sorted when ``b_{y,j} < 0``,
  as :meth:`sensiv.sensitivity.direct_sets.Scale.to_outcome` does);
* or a **polytope** ``{α : Aα ≤ b}`` in outcome units, in the CSV format of
  :func:`sensiv.sensitivity.direct_sets.read_polytope` (one column per instrument named as in
  the table, plus ``bound``).  Its vertices are never enumerated (J may be in the hundreds):
  everything downstream needs only the range of a linear function over Γ, one linear programme
  per end (scipy's HiGHS, :func:`linear_range`).

Scaling ``tΓ`` is about zero, as in the sweep.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from sensiv.core.errors import InputError
from sensiv.core.results import json_number
from sensiv.sensitivity.associations import Associations
from sensiv.sensitivity.direct_sets import RangeSpec, parse_range, polytope_rows

UNITS = ("", "se", "rf")
UNIT_WORDS = {"": "outcome units", "se": "multiples of each instrument's reduced-form SE",
              "rf": "shares of each instrument's reduced form"}


def parse_allowance(text: str, option: str = "--direct") -> RangeSpec:
    """Parse ``LOW:HIGH`` with an optional unit suffix ``se`` or ``rf`` (one range for every
    instrument).

    Examples
    --------
    >>> parse_allowance("-2:2se")
    RangeSpec(low=-2.0, high=2.0, unit='se')
    """
    return parse_range(
        text, option, UNITS,
        f"{option}=-0.01:0.01 (outcome units), -2:2se (multiples of each instrument's "
        "reduced-form SE) or -0.2:0.2rf (share of its reduced form)",
        "none (outcome units), 'se' (multiples of each instrument's reduced-form SE) or "
        "'rf' (share of its reduced form) with a per-instrument table")


@dataclass(frozen=True, slots=True)
class Allowance:
    """A direct-effect set Γ over the instruments of a table, in outcome units.

    A box has ``lows``/``highs`` (and ``spec``, the range as the user stated it, when it came
    from one range); a polytope has ``constraints``/``rhs`` and ``lows``/``highs`` its bounding
    box (``±inf`` where unbounded).  ``factor[j]`` converts one unit of ``spec`` to outcome
    units for instrument *j* (1, ``s_{y,j}`` or ``b_{y,j}``).
    """

    instruments: tuple[str, ...]
    lows: np.ndarray
    highs: np.ndarray
    unit: str
    spec: RangeSpec | None
    factor: np.ndarray
    constraints: np.ndarray | None = None
    rhs: np.ndarray | None = None

    @property
    def is_box(self) -> bool:
        return self.constraints is None

    @property
    def text(self) -> str:
        """The set in words: ``"-2:2se"`` or ``"polytope (m rows)"`` (the unit in
        :data:`UNIT_WORDS`, outcome units for a polytope)."""
        if self.spec is not None:
            return self.spec.text()
        if self.is_box:
            return "per-instrument ranges"
        return f"polytope ({self.constraints.shape[0]} rows)"

    @property
    def radius(self) -> np.ndarray:
        """Per instrument the largest ``|α_j|`` in Γ (outcome units; ``inf`` if unbounded)."""
        return np.maximum(np.abs(self.lows), np.abs(self.highs))

    @property
    def radius_in_unit(self) -> float | None:
        """The largest ``|value|`` of the stated range in its own unit (``None``: polytope)."""
        if self.spec is None:
            return None
        return max(abs(self.spec.low), abs(self.spec.high))

    def to_dict(self) -> dict:
        return {"kind": "box" if self.is_box else "polytope", "text": self.text,
                "unit": self.unit, "unit_words": UNIT_WORDS[self.unit],
                "range": ([self.spec.low, self.spec.high] if self.spec is not None else None),
                "lower": [json_number(v) for v in self.lows],
                "upper": [json_number(v) for v in self.highs]}


def unit_factor(assoc: Associations, unit: str) -> np.ndarray:
    """Outcome units per one unit of ``unit`` for every instrument (1, ``s_y`` or ``b_y``)."""
    if unit == "se":
        return assoc.reduced_form_se.copy()
    if unit == "rf":
        return assoc.reduced_form.copy()
    return np.ones(assoc.count)


def box_allowance(assoc: Associations, spec: RangeSpec | str) -> Allowance:
    """Γ from one range applied to every instrument (module docstring for the units)."""
    spec = parse_allowance(spec) if isinstance(spec, str) else spec
    if spec.unit not in UNITS:
        raise InputError(f"unit '{spec.unit}' is not available with a per-instrument table; "
                         "use none, 'se' or 'rf'")
    factor = unit_factor(assoc, spec.unit)
    a, b = spec.low * factor, spec.high * factor
    return Allowance(assoc.names, np.minimum(a, b), np.maximum(a, b), spec.unit, spec, factor)


def bounds_allowance(assoc: Associations, lows, highs) -> Allowance:
    """Γ = ``∏ [lows_j, highs_j]`` in outcome units (one range per instrument)."""
    lo = np.asarray(lows, float).reshape(-1)
    hi = np.asarray(highs, float).reshape(-1)
    if lo.size != assoc.count or hi.size != assoc.count:
        raise InputError(f"give one direct-effect range per instrument ({assoc.count}); got "
                         f"{lo.size} lower and {hi.size} upper ends")
    if not (np.all(np.isfinite(lo)) and np.all(np.isfinite(hi))):
        raise InputError("direct-effect ranges must be finite")
    if np.any(lo > hi):
        j = int(np.flatnonzero(lo > hi)[0])
        raise InputError(f"the direct-effect range of instrument '{assoc.names[j]}' has LOW "
                         f"{lo[j]:g} above HIGH {hi[j]:g}; swap them")
    return Allowance(assoc.names, lo, hi, "", None, np.ones(assoc.count))


def linear_range(constraints: np.ndarray, rhs: np.ndarray, direction: np.ndarray
                 ) -> tuple[float, float]:
    """``(min, max)`` of ``direction'α`` over ``{α : Aα ≤ b}`` (two linear programmes, scipy
    ``linprog`` with HiGHS); ``±inf`` when unbounded, :class:`InputError` when empty."""
    from scipy.optimize import linprog

    ends = []
    for sign in (1.0, -1.0):
        res = linprog(sign * direction, A_ub=constraints, b_ub=rhs,
                      bounds=[(None, None)] * direction.size, method="highs")
        if res.status == 2:
            raise InputError("the direct-effect polytope is empty (its constraints contradict "
                             "each other); check the rows a'α ≤ bound")
        if res.status == 3:
            ends.append(-math.inf)
        elif res.status == 0:
            ends.append(float(res.fun))
        else:
            raise InputError(f"the linear programme over the direct-effect polytope failed "
                             f"({res.message}); check its rows")
    return ends[0], -ends[1]


def polytope_allowance(assoc: Associations, constraints, rhs) -> Allowance:
    """Γ = ``{α : constraints @ α ≤ rhs}`` (outcome units); non-empty, with a bounding box
    from ``2J`` linear programmes (``±inf`` where Γ is unbounded)."""
    a = np.atleast_2d(np.asarray(constraints, float))
    b = np.asarray(rhs, float).reshape(-1)
    if a.shape[0] == 0:
        raise InputError("the direct-effect polytope has no constraints; add rows a'α ≤ bound")
    if a.shape[1] != assoc.count or b.size != a.shape[0]:
        raise InputError(f"the direct-effect polytope needs {assoc.count} coefficient columns "
                         "(one per instrument) and one bound per row")
    if not (np.all(np.isfinite(a)) and np.all(np.isfinite(b))):
        raise InputError("the direct-effect polytope has non-finite entries")
    lows, highs = np.empty(assoc.count), np.empty(assoc.count)
    for j in range(assoc.count):
        e = np.zeros(assoc.count)
        e[j] = 1.0
        lows[j], highs[j] = linear_range(a, b, e)
    return Allowance(assoc.names, lows, highs, "", None, np.ones(assoc.count), a, b)


def read_polytope_allowance(path, assoc: Associations, *, bounded: bool = False) -> Allowance:
    """Γ from a polytope CSV file (format of :func:`~sensiv.sensitivity.direct_sets.
    read_polytope`, columns named as the instruments of the table); a column naming no
    instrument of the table is refused, and with ``bounded`` so is a polytope unbounded in
    any instrument's direct effect."""
    rows = polytope_rows(path, assoc.names)
    check_polytope_columns(path, assoc.names)
    allowance = polytope_allowance(assoc, *rows)
    if bounded:
        free = [n for n, lo, hi in zip(assoc.names, allowance.lows, allowance.highs)
                if not (math.isfinite(lo) and math.isfinite(hi))]
        if free:
            shown = ", ".join(free[:5]) + (f" and {len(free) - 5} more" if len(free) > 5 else "")
            raise InputError(f"the direct-effect polytope in '{path}' leaves the direct effect "
                             f"of {shown} unbounded, so no bound holds for it; add rows that "
                             "bound every instrument's direct effect (e.g. a'α ≤ bound and "
                             "-a'α ≤ bound)")
    return allowance


def check_polytope_columns(path, instruments) -> None:
    """Refuse a polytope file whose columns name instruments the table does not have."""
    import pandas as pd

    header = [str(c) for c in pd.read_csv(path, nrows=0).columns]
    unknown = [c for c in header if c not in (*instruments, "bound")]
    if unknown:
        raise InputError(f"polytope file '{path}' has column(s) {', '.join(unknown)}, which "
                         f"name no instrument of the table; its columns must be the "
                         f"instruments ({', '.join(instruments[:5])}"
                         f"{', ...' if len(instruments) > 5 else ''}) and 'bound'")


def allowance_range(allowance: Allowance, slope: np.ndarray) -> tuple[float, float]:
    """``(m, M)``: the smallest and largest ``slope'α`` over Γ — closed form for a box
    (``Σ min/max(slope_j l_j, slope_j u_j)``), two linear programmes for a polytope."""
    if allowance.is_box:
        lo, hi = slope * allowance.lows, slope * allowance.highs
        return float(np.minimum(lo, hi).sum()), float(np.maximum(lo, hi).sum())
    return linear_range(allowance.constraints, allowance.rhs, slope)
