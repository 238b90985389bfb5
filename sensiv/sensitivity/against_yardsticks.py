r"""A sweep's breakdown set against the leave-one-out yardsticks of the same data.

A breakdown says how large a direct effect the conclusion survives; a yardstick says how large
a direct effect would be as large as the confounding one observed control removes.  Their
ratio is the one number a referee asks for: per instrument ``k`` and yardstick ``j``,

``ratio_jk = |implied_direct_jk| / breakdown_k``

with ``breakdown_k`` the largest absolute direct effect of the scaled set at the breakdown
(``sensiv.sensitivity.breakdown_units``, outcome units).  A ratio above 1 means that a
violation as large as the yardstick would overturn the conclusion; below 1 that the conclusion
survives it.  The comparison is a judgement aid, not a test: it assumes that an unobserved
violation is comparable in size to the observed confounding.
"""

from __future__ import annotations

from dataclasses import dataclass

from sensiv.core.results import json_number


@dataclass(frozen=True, slots=True)
class Against:
    """One yardstick of one instrument beside the breakdown direct effect of that instrument."""

    instrument: str
    yardstick: str
    implied: float            # |implied direct effect| of the yardstick, outcome units
    implied_rf: float | None  # the same as a share of the reduced form
    ratio: float | None       # implied / breakdown (None without a finite breakdown)

    def to_dict(self) -> dict:
        return {"instrument": self.instrument, "yardstick": self.yardstick,
                "implied": json_number(self.implied), "implied_rf": json_number(self.implied_rf),
                "ratio": json_number(self.ratio)}


@dataclass(frozen=True, slots=True)
class YardstickComparison:
    """The breakdown direct effect of each instrument (outcome units and share of the reduced
    form; ``None`` without a finite breakdown) and every yardstick beside it, the largest
    yardstick of each instrument first."""

    instruments: tuple[str, ...]
    breakdown: tuple[float | None, ...]
    breakdown_rf: tuple[float | None, ...]
    threshold: float
    conclusion: str
    items: tuple[Against, ...]

    @property
    def largest(self) -> tuple[Against, ...]:
        """Per instrument the yardstick with the largest implied direct effect."""
        seen: dict[str, Against] = {}
        for item in self.items:
            seen.setdefault(item.instrument, item)
        return tuple(seen.values())

    def to_dict(self) -> dict:
        return {"instruments": list(self.instruments),
                "breakdown_direct": [json_number(v) for v in self.breakdown],
                "breakdown_rf": [json_number(v) for v in self.breakdown_rf],
                "threshold": json_number(self.threshold), "conclusion": self.conclusion,
                "yardsticks": [item.to_dict() for item in self.items]}


def compare(sweep, calibration) -> YardstickComparison:
    """Set a sweep's breakdown (``sweep.breakdown.direct_units``) against the yardsticks of a
    calibration of the same data and instruments.

    Examples
    --------
    A yardstick of 0.06 against a breakdown of 0.015 is four times as large::

        compare(sweep, calibration).items[0].ratio  # -> 4.0
    """
    units = sweep.breakdown.direct_units
    instruments = tuple(sweep.instruments)
    if units is None:
        breakdown: tuple[float | None, ...] = (None,) * len(instruments)
        breakdown_rf: tuple[float | None, ...] = (None,) * len(instruments)
    else:
        breakdown, breakdown_rf = tuple(units.outcome), tuple(units.rf)
    items = []
    for k, z in enumerate(instruments):
        own = sorted((y for y in calibration.yardsticks if y.instrument == z),
                     key=lambda y: -abs(y.implied_direct))
        for y in own:
            b = breakdown[k]
            ratio = abs(y.implied_direct) / b if b else None
            items.append(Against(z, y.name, abs(y.implied_direct),
                                 abs(y.implied_direct_rf), ratio))
    return YardstickComparison(instruments, breakdown, breakdown_rf,
                               sweep.breakdown.threshold, sweep.breakdown.conclusion,
                               tuple(items))
