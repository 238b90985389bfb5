r"""Intervals at a user-chosen grid of direct effects (``sweep --at 0.005,0.01,0.02``).

Each value ``v`` of the grid stands for the symmetric box ``[−v, v]`` of direct effects for
*every* instrument at once (a value with suffix ``rf`` or ``sd`` is converted per instrument,
so ``0.1rf`` is ±10% of each instrument's own reduced-form coefficient).  At each box the
identified set, the union of Wald intervals (Conley, Hansen & Rossi 2012) and the bias-aware
interval (Armstrong & Kolesár 2021) are computed exactly, as for the stated set.
"""

from __future__ import annotations

import math
import re
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from sensiv.core.errors import InputError
from sensiv.core.limits import check_magnitude
from sensiv.core.results import Interval, json_number
from sensiv.sensitivity.bias_aware import bias_aware
from sensiv.sensitivity.direct_sets import UNITS, Scale, box_set
from sensiv.sensitivity.linear_core import Core
from sensiv.sensitivity.union_sets import identified_curve_set, union_curve_set

MAX_AT = 200                # grid values in one --at
_VALUE = re.compile(r"^\s*([0-9.eE+-]+?)\s*([a-zA-Z]*)\s*$")


@dataclass(frozen=True, slots=True)
class AtValue:
    """One grid value as written: a non-negative size and its unit ("", "rf" or "sd")."""

    value: float
    unit: str

    def text(self) -> str:
        return f"{self.value:g}{self.unit}"


@dataclass(frozen=True, slots=True)
class AtPoint:
    """The intervals at the box ``±direct[k]`` (outcome units) for every instrument ``k``."""

    given: AtValue
    direct: tuple[float, ...]
    identified_set: Interval
    union_ci: Interval
    bias_aware_ci: Interval

    def to_dict(self) -> dict:
        return {"value": self.given.value, "unit": self.given.unit or "outcome",
                "direct": [json_number(v) for v in self.direct],
                "identified_set": self.identified_set.to_list(),
                "union_ci": self.union_ci.to_list(),
                "bias_aware_ci": self.bias_aware_ci.to_list()}


def parse_at(values: str | Sequence[str | float] | None) -> tuple[AtValue, ...]:
    """``"0.005,0.01,0.02"`` (or a list of numbers or strings; suffix ``rf``/``sd`` allowed)
    as grid values; ``()`` for ``None``.

    Examples
    --------
    >>> [a.text() for a in parse_at("0.005, 0.1rf")]
    ['0.005', '0.1rf']
    """
    if values is None:
        return ()
    items: list = []
    for v in ([values] if isinstance(values, str) else list(values)):
        items += [p for p in v.split(",")] if isinstance(v, str) else [v]
    if len(items) > MAX_AT:
        raise InputError(f"--at has {len(items)} values; give at most {MAX_AT}")
    return tuple(_one(v) for v in items)


def _one(item) -> AtValue:
    if isinstance(item, (int, float)) and not isinstance(item, bool):
        value, unit = float(item), ""
    else:
        match = _VALUE.match(str(item))
        try:
            value, unit = float(match.group(1)), match.group(2) if match else ""
        except (AttributeError, ValueError):
            raise InputError(f"--at value '{item}' is not a number; write sizes of the direct "
                             "effect such as --at 0.005,0.01,0.02 (outcome units) or "
                             "--at 0.1rf,0.2rf") from None
    if unit not in UNITS:
        raise InputError(f"--at value '{item}' has unknown unit suffix '{unit}'; use none "
                         "(outcome units), 'rf' (share of the reduced-form coefficient) or 'sd' "
                         "(outcome SDs per instrument SD)")
    if not math.isfinite(value) or value < 0:
        raise InputError(f"--at value '{item}' must be a finite number ≥ 0: each value v "
                         "stands for direct effects between −v and v")
    check_magnitude(value, f"--at value '{item}'")
    return AtValue(value, unit)


def union_curve_interval(core: Core, dset) -> Interval:
    """The union interval over the box ``dset`` (corners while few, else branch and bound:
    :func:`sensiv.sensitivity.union_sets.union_curve_set`)."""
    lo, hi, _ = union_curve_set(core, dset, np.array([1.0]))
    return Interval(float(lo[0]), float(hi[0]))


def at_points(core: Core, scale: Scale, grid: Sequence[AtValue], confidence_level: float,
              unbounded: bool = False) -> tuple[AtPoint, ...]:
    """The identified set, union and bias-aware intervals at each box of the grid
    (``unbounded``: the first stage is not significant, so both intervals are the whole
    line, as for the stated set)."""
    whole = Interval(-math.inf, math.inf)
    out = []
    for given in grid:
        half = tuple(abs(scale.to_outcome(k, given.value, given.unit))
                     for k in range(len(core.instruments)))
        dset = box_set(core.instruments, [(-h, h) for h in half])
        lo, hi = identified_curve_set(core, dset, np.array([1.0]))
        union = whole if unbounded else union_curve_interval(core, dset)
        ba = bias_aware([core], dset, confidence_level, unbounded=unbounded)
        out.append(AtPoint(given, half, Interval(float(lo[0]), float(hi[0])), union, ba.ci))
    return tuple(out)
