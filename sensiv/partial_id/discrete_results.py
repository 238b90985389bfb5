"""Result objects of the discrete bounds (:func:`sensiv.partial_id.discrete.discrete_bounds`)
and their JSON form; the plain-text summary is built in :mod:`sensiv.present.text_discrete`."""

from __future__ import annotations

from dataclasses import dataclass, field

from sensiv.partial_id.discrete_data import CountsTable, plain_number
from sensiv.core.results import Interval, Presentable, describe, json_number

CAUTION = ("Caution: these bounds hold only under the stated assumptions — a randomised "
           "instrument and at most the stated share of units whose outcome the instrument "
           "changes directly (and, if assumed, the monotonicity of the treatment in the "
           "instrument). A model that fits the data, or an instrumental inequality that holds, "
           "does not prove the instrument valid.")


# --------------------------------------------------------------------------- results
@dataclass(frozen=True, slots=True)
class InstrumentalInequality:
    """Pearl's (1995) inequality: ``value = max_x Σ_y max_z P(y, x | z)``, which a valid
    instrument keeps at or below 1; ``treatment_level`` is the maximising ``x``."""

    value: float
    holds: bool
    treatment_level: float

    def to_dict(self) -> dict:
        return {"value": self.value, "holds": self.holds,
                "treatment_level": plain_number(self.treatment_level)}


@dataclass(frozen=True, slots=True)
class CurvePoint:
    """Bounds at one budget; ``bounds`` is ``None`` where the model does not fit the data."""

    budget: float
    bounds: Interval | None

    def to_dict(self) -> dict:
        low, high = self.bounds.to_list() if self.bounds is not None else (None, None)
        return {"budget": self.budget, "lower": low, "upper": high}


@dataclass(frozen=True, slots=True)
class ContrastBounds:
    """Bounds on ``E[Y(level) − Y(base)]`` (averaged over ``P(z)``) with their inference."""

    level: float
    base: float
    bounds: Interval | None
    se: tuple[float, float] | None
    ci: Interval | None
    curve: tuple[CurvePoint, ...]
    breakdown_budget: float | None

    def to_dict(self) -> dict:
        return {
            "level": plain_number(self.level),
            "base": plain_number(self.base),
            "bounds": self.bounds.to_list() if self.bounds is not None else None,
            "se": [json_number(s) for s in self.se] if self.se is not None else None,
            "ci": self.ci.to_list() if self.ci is not None else None,
            "curve": [point.to_dict() for point in self.curve],
            "breakdown_budget": self.breakdown_budget,
        }


@dataclass(frozen=True, slots=True)
class Bootstrap:
    """Multinomial bootstrap of the counts: ``used`` replicates gave bounds, ``infeasible``
    ones did not fit the model at the budget, ``skipped`` ones left a level of ``Z`` empty."""

    reps: int
    seed: int
    used: int
    infeasible: int
    skipped: int

    def to_dict(self) -> dict:
        return {"reps": self.reps, "seed": self.seed, "used": self.used,
                "infeasible": self.infeasible, "skipped": self.skipped}


@dataclass(frozen=True, slots=True)
class DiscreteBounds(Presentable):
    """Result of :func:`discrete_bounds`.

    ``bounds``, ``ci``, ``curve`` and ``breakdown_budget`` describe the focus contrast: the
    highest treatment level against the lowest (the only one for a binary treatment);
    ``contrasts`` holds every level against the lowest.
    """

    table: CountsTable
    budget: float
    monotone: bool
    defier_budget: float
    threshold: float
    confidence_level: float
    contrasts: tuple[ContrastBounds, ...]
    min_budget: float | None
    min_defier_budget: float | None
    inequality: InstrumentalInequality
    bootstrap: Bootstrap | None
    notes: tuple[str, ...] = field(default=())

    @property
    def focus(self) -> ContrastBounds:
        return self.contrasts[-1]

    @property
    def bounds(self) -> Interval | None:
        return self.focus.bounds

    @property
    def ci(self) -> Interval | None:
        return self.focus.ci

    @property
    def curve(self) -> tuple[CurvePoint, ...]:
        return self.focus.curve

    @property
    def breakdown_budget(self) -> float | None:
        return self.focus.breakdown_budget

    @property
    def caution(self) -> str:
        return CAUTION

    def estimand(self) -> str:
        t, c = self.table, self.focus
        z = t.instrument
        return (f"sum over k of P({z}=k) * E[{t.outcome}({t.treatment}={plain_number(c.level)}, "
                f"{z}=k) - {t.outcome}({t.treatment}={plain_number(c.base)}, {z}=k)]")

    def assumptions(self) -> list[str]:
        t = self.table
        z_order = " < ".join(str(plain_number(v)) for v in t.instrument_levels)
        out = [
            f"{t.instrument} is randomised: independent of every unit's potential treatments "
            "and potential outcomes",
            f"exclusion relaxed by a budget: at most a share {self.budget:g} of units have an "
            f"outcome that {t.instrument} changes directly for some level of {t.treatment} "
            "(0 would be the exclusion restriction)",
            f"the effect averages {t.instrument}'s direct effect over its observed "
            f"distribution: {self.estimand()}",
        ]
        if tuple(t.outcome_levels) != (0.0, 1.0):
            levels = ", ".join(str(plain_number(v)) for v in t.outcome_levels)
            out.append(f"{t.outcome}'s levels ({levels}) are taken as numbers: the effect is "
                       f"on the mean of {t.outcome}, and {t.outcome} takes no other values")
        if self.monotone:
            out.append(f"monotonicity: {t.treatment} never falls as {t.instrument} moves up "
                       f"the order {z_order}, except for at most a share "
                       f"{self.defier_budget:g} of units (defiers)")
        out.append("units are independent draws from the population; the confidence interval "
                   "comes from a multinomial bootstrap of the counts and is approximate "
                   "(bounds are maxima of linear functions of the data, where the bootstrap "
                   "can under-cover when two of them nearly tie)")
        return out

    def to_dict(self) -> dict:
        focus = self.focus.to_dict()
        return {
            "bounds": focus["bounds"],
            "ci": focus["ci"],
            "se": focus["se"],
            "curve": focus["curve"],
            "breakdown_budget": focus["breakdown_budget"],
            "min_budget": self.min_budget,
            "inequality_holds": self.inequality.holds,
            "instrumental_inequality": self.inequality.to_dict(),
            "contrast": {"level": focus["level"], "base": focus["base"]},
            "contrasts": [c.to_dict() for c in self.contrasts],
            "estimand": self.estimand(),
            "budget": self.budget,
            "monotone": self.monotone,
            "defier_budget": self.defier_budget if self.monotone else None,
            "min_defier_budget": self.min_defier_budget,
            "threshold": self.threshold,
            "confidence_level": self.confidence_level,
            "bootstrap": self.bootstrap.to_dict() if self.bootstrap is not None else None,
            "data": self.table.to_dict(),
            "notes": list(self.notes),
            "assumptions": self.assumptions(),
            "caution": CAUTION,
        }

    def __str__(self) -> str:
        return describe(self)

