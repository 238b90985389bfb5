"""The per-instrument analysis of published associations (``sensiv published --per-instrument``).

From one row per instrument (first-stage and reduced-form associations with their SEs, as a
Mendelian randomisation study publishes them): the IVW estimate with first- and second-order
weights, fixed- and random-effects SEs and Cochran's Q (:mod:`.associations`), and the robust
estimators as yardsticks (:mod:`.robust_estimators`: MR-Egger, weighted median, mode-based).
"""

from __future__ import annotations

from dataclasses import dataclass, field

from sensiv.core.errors import InputError
from sensiv.core.results import Presentable, describe
from sensiv.sensitivity import robust_estimators as robust
from sensiv.sensitivity.associations import IVW, WEIGHT_ORDERS, Associations, ivw
from sensiv.sensitivity.bounds import DEFAULT_POINTS
from sensiv.sensitivity.invalid_count import InvalidCount, invalid_count
from sensiv.sensitivity.per_instrument import DirectEffects, direct_effects
from sensiv.sensitivity.per_instrument_prior import PriorEffects, prior_effects
from sensiv.sensitivity.per_instrument_sets import read_polytope_allowance

KIND = "per_instrument"
FOCUS = "exposure"

CAUTION = ("Caution: genetic and other per-instrument associations can violate independence as "
           "well as exclusion (population structure, assortative mating, dynastic effects), "
           "which no direct-effect range covers; sensitivity bounds hold only under the stated "
           "ranges, the yardsticks only under their own assumptions, and neither proves any "
           "instrument valid.")


@dataclass(frozen=True, slots=True)
class PublishedTableResult(Presentable):
    """IVW estimates and robust yardsticks from a per-instrument table.

    ``to_dict()`` keys: ``kind``, ``table``, ``instruments`` (one entry per instrument: name,
    associations, ratio estimate and its SE), ``ivw`` (the chosen weights), ``ivw_by_weights``
    (``first`` and ``second``), ``yardsticks`` (``egger``, ``weighted_median``, ``mode``; each
    ``{"available": false, "reason": ...}`` when it cannot be computed), ``invalid_count``
    (the invalid-count breakdown), ``direct`` (direct effects bounded per instrument, from
    ``--direct``; ``null`` without), ``prior`` (the normal prior on the direct effects, from
    ``--prior``; ``null`` without), ``assumptions``, ``caution``.
    """

    table: str
    associations: Associations
    weights: str
    ivw: IVW
    ivw_first: IVW
    ivw_second: IVW
    yardsticks: robust.Yardsticks
    confidence_level: float
    invalid: InvalidCount | None = None
    direct: DirectEffects | None = None
    prior: PriorEffects | None = None
    notes: tuple[str, ...] = field(default=())

    @property
    def focus(self) -> str:
        return FOCUS

    def assumptions(self) -> list[str]:
        out = [
            "each instrument affects the outcome only through the treatment (no direct "
            "effect) for the IVW estimate; linear effects, constant across instruments",
            "the instruments are independent of each other and of the confounders; the "
            "associations of different instruments are uncorrelated (independent instruments)",
            "first-stage and reduced-form associations estimated independently (as with two "
            "samples) for the second-order weights; large-sample normal critical values",
        ]
        yard = self.yardsticks
        for key, value in (("egger", yard.egger), ("weighted_median", yard.weighted_median),
                           ("mode", yard.mode)):
            if value is not None:
                out.append(f"for the {robust.TITLES[key]}: {robust.ASSUMPTIONS[key]}")
        for part, words in ((self.direct, "direct-effect bounds"), (self.prior, "prior interval"),
                            (self.invalid, "invalid-count breakdown")):
            if part is not None:
                out += [f"for the {words}: {a}" for a in part.assumptions()]
        return out

    def to_dict(self) -> dict:
        a = self.associations
        theta, se1, se2 = a.ratios, a.ratio_se("first"), a.ratio_se("second")
        instruments = [
            {"name": a.names[j], "first_stage": float(a.first_stage[j]),
             "first_stage_se": float(a.first_stage_se[j]),
             "reduced_form": float(a.reduced_form[j]),
             "reduced_form_se": float(a.reduced_form_se[j]), "ratio": float(theta[j]),
             "ratio_se_first": float(se1[j]), "ratio_se_second": float(se2[j]),
             "weight": float(self.ivw.weights[j] / self.ivw.weights.sum())}
            for j in range(a.count)]
        return {"kind": KIND, "table": self.table, "count": a.count,
                "confidence_level": self.confidence_level, "weights": self.weights,
                "ivw": self.ivw.to_dict(),
                "ivw_by_weights": {"first": self.ivw_first.to_dict(),
                                   "second": self.ivw_second.to_dict()},
                "yardsticks": self.yardsticks.to_dict(), "instruments": instruments,
                "invalid_count": None if self.invalid is None else self.invalid.to_dict(),
                "direct": None if self.direct is None else self.direct.to_dict(),
                "prior": None if self.prior is None else self.prior.to_dict(),
                "assumptions": self.assumptions(), "caution": CAUTION,
                "notes": list(self.notes)}

    def __str__(self) -> str:
        return describe(self)


def one_text(value, option: str) -> str | None:
    """A ``--direct`` / ``--prior`` value given once (a recipe gives a list of strings)."""
    if value is None or isinstance(value, str):
        return value
    values = list(value)
    if len(values) != 1:
        raise InputError(f"{option} takes one value with a per-instrument table (one range or "
                         f"prior for every instrument); got {len(values)}")
    return str(values[0])


def published_table(assoc: Associations, *, table: str = "the table", weights: str = "first",
                    confidence_level: float = 0.95, reps: int = robust.DEFAULT_REPS,
                    seed: int | None = None, phi: float = robust.DEFAULT_PHI,
                    require_egger: bool = False, direct=None, prior=None,
                    threshold: float = 0.0, points: int = DEFAULT_POINTS,
                    count_invalid: bool = True, polytope=None) -> PublishedTableResult:
    """IVW (both weight orders), the yardsticks, the invalid-count breakdown and, when given,
    the direct-effect bounds (``direct``: one range such as ``"-2:2se"``) and the prior
    interval (``prior``: ``"normal:MEAN:SD"``); ``polytope`` instead of ``direct``: the path of
    a polytope CSV file (:func:`~.per_instrument_sets.read_polytope_allowance`);
    ``require_egger`` refuses J < 3."""
    if weights not in WEIGHT_ORDERS:
        raise InputError(f"--weights {weights!r} is not one of {', '.join(WEIGHT_ORDERS)}; "
                         "give first (the reduced-form SE only) or second (also the "
                         "first-stage SE)")
    if require_egger and assoc.count < robust.MIN_INSTRUMENTS:
        robust.egger(assoc, confidence_level)
    direct, prior = one_text(direct, "--direct"), one_text(prior, "--prior")
    if direct is not None and polytope is not None:
        raise InputError("--direct and --direct-polytope both state the direct-effect set; "
                         "give one range for every instrument (--direct) or a polytope file "
                         "(--direct-polytope), not both")
    if polytope is not None:
        direct = read_polytope_allowance(polytope, assoc, bounded=True)
    first = ivw(assoc, "first", confidence_level)
    second = ivw(assoc, "second", confidence_level)
    yard = robust.yardsticks(assoc, weights, confidence_level, reps, seed, phi)
    common = {"threshold": threshold, "confidence_level": confidence_level, "order": weights}
    bounds = (None if direct is None else
              direct_effects(assoc, direct, points=points, focus=FOCUS, **common))
    law = None if prior is None else prior_effects(assoc, prior, focus=FOCUS, **common)
    count = invalid_count(assoc, **common) if count_invalid else None
    notes = []
    if assoc.count < robust.MIN_INSTRUMENTS:
        notes.append(f"the robust yardsticks need at least {robust.MIN_INSTRUMENTS} "
                     f"instruments; the table has {assoc.count}")
    return PublishedTableResult(table, assoc, weights, first if weights == "first" else second,
                                first, second, yard, confidence_level, count, bounds, law,
                                tuple(notes))
