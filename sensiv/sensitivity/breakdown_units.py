r"""A breakdown read in the units a referee judges: the direct effect itself.

A breakdown scale ``t*`` of the stated set Γ depends on the user's arbitrary choice of Γ; the
direct effect at which the conclusion breaks does not.  Per instrument ``k`` this module reads
the scaled set ``t*·Γ`` as one number, the largest absolute direct effect it allows,
``t*·max(|low_k|, |high_k|)`` over Γ's bounding box (for a symmetric box ``±a_k`` simply
``t*·a_k``), in three units:

* ``outcome`` — outcome units (what the model's ``γ`` is measured in);
* ``rf`` — as a share of the instrument's reduced-form coefficient, ``|value / π_k|``;
* ``sd`` — outcome SDs per instrument SD, ``value · SD(z_k) / SD(y)``.

With several instruments the numbers hold *together* (a box with these half-widths, or the
bounding box of the scaled polytope), not one instrument at a time.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from sensiv.core.results import Interval, json_number


@dataclass(frozen=True, slots=True)
class DirectUnits:
    """Per instrument: the largest absolute direct effect of a scaled set, in three units
    (``None`` where a unit is not available: a zero reduced form, or no SDs)."""

    instruments: tuple[str, ...]
    outcome: tuple[float, ...]
    rf: tuple[float | None, ...]
    sd: tuple[float | None, ...]

    def to_dict(self) -> dict:
        return {"instruments": list(self.instruments),
                "outcome": [json_number(v) for v in self.outcome],
                "rf": [json_number(v) for v in self.rf],
                "sd": [json_number(v) for v in self.sd]}


def radius(box: Sequence[Interval]) -> tuple[float, ...]:
    """The largest absolute value in each range of a box: ``max(|low|, |high|)``."""
    return tuple(max(abs(b.low), abs(b.high)) for b in box)


def direct_units(scale: float | None, instruments: Sequence[str], box: Sequence[Interval],
                 reduced_form: Sequence[float] | None, outcome_sd: float | None = None,
                 instrument_sd: Sequence[float] | None = None) -> DirectUnits | None:
    """The direct effects of ``scale·Γ`` (``box``: Γ's bounding box) in the three units.

    ``None`` when there is no finite positive breakdown scale (no conclusion at zero direct
    effect, or none within the largest scale examined).

    Examples
    --------
    >>> u = direct_units(2.0, ["z"], [Interval(-0.01, 0.01)], [0.05], 1.0, [0.5])
    >>> [round(v, 6) for v in (u.outcome[0], u.rf[0], u.sd[0])]
    [0.02, 0.4, 0.01]
    """
    if scale is None or scale == 0.0 or not math.isfinite(scale):
        return None
    outcome = tuple(scale * r for r in radius(box))
    k = len(outcome)
    rf: list[float | None] = [None] * k
    if reduced_form is not None:
        rf = [abs(v / p) if p != 0 else None for v, p in zip(outcome, reduced_form)]
    sd: list[float | None] = [None] * k
    if outcome_sd is not None and instrument_sd is not None and outcome_sd > 0:
        sd = [v * s / outcome_sd for v, s in zip(outcome, instrument_sd)]
    return DirectUnits(tuple(instruments), outcome, tuple(rf), tuple(sd))


def curve_units(scales: Sequence[float], box: Sequence[Interval],
                reduced_form: Sequence[float] | None, outcome_sd: float | None = None,
                instrument_sd: Sequence[float] | None = None
                ) -> list[tuple[tuple[float, ...], tuple[float | None, ...],
                                tuple[float | None, ...]]]:
    """For every scale ``t`` of a curve: the direct effects of ``t·Γ`` per instrument in
    outcome units, as a share of the reduced form and in SD units (``t = 0`` gives zeros)."""
    radii = radius(box)
    out = []
    for t in scales:
        outcome = tuple(float(t) * r for r in radii)
        rf = (tuple(abs(v / p) if p != 0 else None for v, p in zip(outcome, reduced_form))
              if reduced_form is not None else (None,) * len(outcome))
        sd = (tuple(v * s / outcome_sd for v, s in zip(outcome, instrument_sd))
              if outcome_sd and instrument_sd is not None else (None,) * len(outcome))
        out.append((outcome, rf, sd))
    return out
