r"""Leave-one-out yardsticks: the direct effect that leaving out an observed control would imply.

For each control (or named group of controls), the shift in the instruments' reduced-form
coefficients when that control is left out,

.. math::

    Δρ_g = ρ(\text{controls} \setminus g) - ρ(\text{controls}),

i.e. the spurious "direct effect" that forgetting an *observed* confounder would have
produced.  All yardsticks come from the same pass-1 moments: a reduced form without a control
is just a different design on the same cross-products.  This module also owns the reduced-form
algebra on moments shared with the zero-first-stage estimate, and the ``--direct`` option
strings offered to ``sweep`` and ``prior``.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from sensiv.core.errors import InputError
from sensiv.core.results import json_number
from sensiv.estimation import linalg
from sensiv.estimation.design import Design, build_design
from sensiv.estimation.moments import Moments
from sensiv.sensitivity.direct_sets import Scale

# Significant digits of the option strings offered for `sweep` and `prior`; range ends are
# rounded outwards so that the offered range contains the computed one.
OPTION_DIGITS = 4


# ============================================================================ option strings
def outward(value: float, up: bool, digits: int = OPTION_DIGITS) -> float:
    """``value`` rounded to ``digits`` significant digits, away from the range's inside
    (up when ``up``, else down), so that an offered range contains the computed one.

    Examples
    --------
    >>> outward(0.123456, up=True), outward(0.123456, up=False)
    (0.1235, 0.1234)
    """
    if value == 0.0 or not math.isfinite(value):
        return value
    exponent = math.floor(math.log10(abs(value))) - digits + 1
    step = 10.0 ** exponent
    rounded = (math.ceil if up else math.floor)(value / step) * step
    return float(f"{rounded:.{digits}g}")


def range_option(low: float, high: float) -> str:
    """``--direct=LOW:HIGH`` with the ends rounded outwards (:func:`outward`)."""
    lo, hi = outward(low, up=False), outward(high, up=True)
    return f"--direct={lo:.{OPTION_DIGITS}g}:{hi:.{OPTION_DIGITS}g}"


# ============================================================================ reduced forms
def partialled(maps: np.ndarray, w: np.ndarray, gram: np.ndarray) -> np.ndarray:
    """Row maps of ``maps`` with the columns of ``w`` partialled out (``gram``: the weighted
    augmented cross-product matrix the maps act on)."""
    if not w.shape[1]:
        return maps
    coef = linalg.scaled_cholesky(w.T @ gram @ w).solve(w.T @ gram @ maps)
    return maps - w @ coef


def instrument_coefficients(moments: Moments, design: Design) -> np.ndarray:
    r"""Coefficients of the instruments in the regressions of each treatment and of the outcome
    on ``[constant, controls, instruments]``, from moments only.

    .. math::

        [\hat π, \hat ρ] = (\tilde Z' \tilde Z)^{-1} \tilde Z' [X, y], \qquad
        \tilde Z = Z - W (W'W)^{-1} W'Z

    Returns
    -------
    ndarray, shape (k_z, k_x + 1)
        One column per treatment (first stages), the last column the reduced form.
    """
    gram = moments.augmented
    zt = partialled(design.z, design.w, gram)
    targets = np.column_stack([design.x, design.y])
    return linalg.scaled_cholesky(zt.T @ gram @ zt).solve(zt.T @ gram @ targets)


def design_for(moments: Moments, layout, controls: Sequence[str]) -> Design:
    """The design of ``layout`` on ``moments`` with only ``controls`` as controls."""
    return build_design(moments, layout.outcome, layout.treatments, layout.instruments,
                           controls, layout.constant)


# ============================================================================ yardsticks
@dataclass(frozen=True, slots=True)
class Yardstick:
    """The direct effect on one instrument implied by leaving out one control or group.

    ``implied_direct = ρ_without − ρ_with`` (outcome units).  Sign convention: positive means
    that ignoring the control would have *added* that much to the instrument's reduced-form
    coefficient.  Since ``ρ = βπ + γ``, an addition to ``ρ`` at a fixed first stage is
    indistinguishable from a direct effect ``γ`` of the same sign, so the value can be entered
    into ``--direct`` as it stands.  The reduced-form shift also carries any shift of the first
    stage (the path instrument → control → treatment → outcome, which is *not* an exclusion
    violation); ``implied_direct_net = Δρ − Δπ'β̂`` removes it, using the full-sample 2SLS
    ``β̂`` (which itself assumes the exclusion restriction).  The two agree when the control
    does not move the first stage.
    """

    name: str
    columns: tuple[str, ...]
    instrument: str
    implied_direct: float
    implied_direct_rf: float
    implied_direct_sd: float
    reduced_form_without: float
    first_stage_shift: dict[str, float]
    implied_direct_net: float

    @property
    def sweep_option(self) -> str:
        """A symmetric ``--direct`` range as large as the yardstick (either sign)."""
        size = abs(self.implied_direct)
        return range_option(-size, size)

    def to_dict(self) -> dict:
        return {"name": self.name, "columns": list(self.columns),
                "instrument": self.instrument,
                "implied_direct": json_number(self.implied_direct),
                "implied_direct_rf": json_number(self.implied_direct_rf),
                "implied_direct_sd": json_number(self.implied_direct_sd),
                "reduced_form_without": json_number(self.reduced_form_without),
                "first_stage_shift": {k: json_number(v)
                                      for k, v in self.first_stage_shift.items()},
                "implied_direct_net": json_number(self.implied_direct_net),
                "sweep_direct": self.sweep_option}


def yardstick_groups(spec, layout, groups: Mapping[str, Sequence[str]] | None
                     ) -> list[tuple[str, tuple[str, ...], tuple[str, ...]]]:
    """``(name, raw columns, design columns)`` of every yardstick.

    Each control is one yardstick under its own name (a text control with all its indicator
    columns); each entry of ``groups`` adds a yardstick that leaves out all its columns.
    """
    indicators = dict(layout.categorical)

    def design_columns(name: str) -> tuple[str, ...]:
        if name in indicators:
            return tuple(f"{name}[{level}]" for level in indicators[name])
        return (name,)

    out = [(c, (c,), design_columns(c)) for c in spec.controls]
    for name, cols in (groups or {}).items():
        if not isinstance(name, str) or not name.strip():
            raise InputError(f"group name {name!r} must be a non-empty string")
        if isinstance(cols, str):
            cols = (cols,)
        cols = tuple(dict.fromkeys(cols))
        if not cols:
            raise InputError(f"group '{name}' names no columns; write --group {name}=COL1,COL2")
        if name in spec.controls:
            raise InputError(f"group name '{name}' is already the name of a control's own "
                             "yardstick; choose another group name")
        unknown = [c for c in cols if c not in spec.controls]
        if unknown:
            raise InputError(
                f"group '{name}' names column(s) {', '.join(map(repr, unknown))} that are not "
                f"controls (controls: {', '.join(spec.controls) or 'none'}); a yardstick "
                "leaves out a control, so add them with --control or remove them from the group")
        out.append((name, cols, tuple(d for c in cols for d in design_columns(c))))
    return out


def leave_one_out_yardsticks(moments: Moments, layout, groups, full: np.ndarray,
                         beta: np.ndarray, scale: Scale) -> tuple[Yardstick, ...]:
    """Yardsticks for every group from one set of moments (no further pass over the rows).

    ``full`` is :func:`instrument_coefficients` with every control; ``beta`` the 2SLS
    coefficients of the treatments.
    """
    k_x = len(layout.treatments)
    out = []
    for name, raw, columns in groups:
        kept = [c for c in layout.controls if c not in columns]
        without = instrument_coefficients(moments, design_for(moments, layout, kept))
        shift = without - full                                   # (k_z, k_x + 1)
        for k, z in enumerate(layout.instruments):
            implied = float(shift[k, k_x])
            out.append(Yardstick(
                name=name, columns=raw, instrument=z, implied_direct=implied,
                implied_direct_rf=scale.in_units(k, implied, "rf"),
                implied_direct_sd=scale.in_units(k, implied, "sd"),
                reduced_form_without=float(without[k, k_x]),
                first_stage_shift=dict(zip(layout.treatments, map(float, shift[k, :k_x]))),
                implied_direct_net=implied - float(shift[k, :k_x] @ beta)))
    return tuple(out)
