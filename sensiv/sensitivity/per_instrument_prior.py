r"""A normal prior on the direct effects of a table of instruments, in closed form.

With ``α_j ~ N(μ f_j, τ² f_j²)`` independently across instruments (``f_j`` the unit of
:func:`~sensiv.sensitivity.per_instrument_sets.unit_factor`: 1 in outcome units, ``s_{y,j}``
in multiples of the reduced-form SE, ``b_{y,j}`` as a share of the reduced form; balanced
pleiotropy when ``μ = 0``), the IVW estimate with its weights held fixed
(:mod:`sensiv.sensitivity.per_instrument`) is ``β̂ = β + w̃'α + e`` with ``e ~ N(0, s²)``, so

.. math::

    \hat β - β \sim N\Big(μ \sum_j \tilde w_j f_j,\; s^2 + τ^2 \sum_j \tilde w_j^2 f_j^2\Big),

and the interval is ``β̂ − μ A ± z \sqrt{s² + τ² Q}`` with ``A = Σ w̃_j f_j``,
``Q = Σ w̃_j² f_j²`` (Conley, Hansen & Rossi 2012's normal prior, here for the IVW estimate).
The prior map evaluates it over a grid of ``(μ, τ)`` and codes each point as the prior map of
:mod:`sensiv.sensitivity.prior` does (kept / contains the threshold / reversed), returned as a
:class:`~sensiv.sensitivity.prior.PriorMap` with ``axis = "per-instrument direct effect"``.
The sign of ``α_j`` is read in the orientation of the table (the sign of ``b_{x,j}`` as given).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np

from sensiv.core.errors import InputError
from sensiv.core.limits import check_count, check_magnitude
from sensiv.core.results import Interval, json_number
from sensiv.sensitivity.associations import Associations, WeightOrder
from sensiv.sensitivity.bounds import conclusion_text
from sensiv.sensitivity.per_instrument import LinearIVW, linear_ivw
from sensiv.sensitivity.per_instrument_sets import UNIT_WORDS, UNITS, unit_factor
from sensiv.sensitivity.prior import (PRIOR_MAP_MARGIN, PRIOR_MAP_POINTS, PRIOR_MAP_SD_REACH,
                                      PRIOR_MAP_SPREAD, PriorMap)

AXIS = "per-instrument direct effect"
CAUTION = ("Caution: a prior interval averages over the stated law of the direct effects; it is "
           "only as credible as that law (independent normal direct effects with the stated "
           "mean and SD), and it does not prove that the instruments are valid.")
_PRIOR = re.compile(r"^\s*(?:normal:)?([^:]+):([^:]*?[0-9.])\s*([a-zA-Z]*)\s*$")


@dataclass(frozen=True, slots=True)
class NormalPrior:
    """``α_j ~ N(mean·f_j, (sd·f_j)²)`` independently; ``unit`` as for ``--direct``."""

    mean: float
    sd: float
    unit: str = ""

    def text(self) -> str:
        return f"normal:{self.mean:g}:{self.sd:g}{self.unit}"


def parse_normal_prior(text: str, option: str = "--prior") -> NormalPrior:
    """Parse ``normal:MEAN:SD`` (or ``MEAN:SD``) with an optional unit suffix ``se`` or ``rf``.

    Examples
    --------
    >>> parse_normal_prior("normal:0:1se")
    NormalPrior(mean=0.0, sd=1.0, unit='se')
    """
    match = _PRIOR.match(str(text))
    if not match:
        raise InputError(f"{option} '{text}' is not a normal prior; write normal:MEAN:SD, e.g. "
                         f"{option}=normal:0:0.01 (outcome units), normal:0:1se or normal:0:0.1rf")
    mean_text, sd_text, unit = match.groups()
    if unit not in UNITS:
        raise InputError(f"{option} '{text}' has unknown unit suffix '{unit}'; use none "
                         "(outcome units), 'se' or 'rf'")
    try:
        mean, sd = float(mean_text), float(sd_text)
    except ValueError as exc:
        raise InputError(f"{option} '{text}' is not a normal prior: MEAN and SD must be "
                         "numbers, as in normal:0:0.01") from exc
    return check_prior(NormalPrior(mean, sd, unit), option)


def check_prior(prior: NormalPrior, option: str = "--prior") -> NormalPrior:
    """A finite mean and a finite SD ≥ 0, or an :class:`InputError` naming them."""
    if not (math.isfinite(prior.mean) and math.isfinite(prior.sd)):
        raise InputError(f"{option} {prior.text()}: the mean and SD must be finite")
    if prior.sd < 0:
        raise InputError(f"{option} {prior.text()}: the SD must be ≥ 0 (got {prior.sd:g})")
    if prior.unit not in UNITS:
        raise InputError(f"{option}: unit '{prior.unit}' is not one of none, 'se', 'rf'")
    check_magnitude(prior.mean, f"{option} mean")
    check_magnitude(prior.sd, f"{option} SD")
    return prior


@dataclass(frozen=True, slots=True)
class PriorEffects:
    """The IVW interval under a normal prior on the direct effects (module docstring).

    ``shift`` is ``A = Σ w̃_j f_j`` (the estimate moves by ``−μA``), ``spread`` is
    ``√Q = √Σ w̃_j² f_j²`` (the SD grows to ``√(s² + τ²Q)``).
    """

    core: LinearIVW
    prior: NormalPrior
    threshold: float
    interval: Interval
    center: float
    sd: float
    shift: float
    spread: float
    conclusion: str
    region: int
    prior_map: PriorMap

    @property
    def confidence_level(self) -> float:
        return self.core.confidence_level

    def assumptions(self) -> list[str]:
        words = UNIT_WORDS[self.prior.unit]
        return [f"direct effects independent across instruments, each normal with mean "
                f"{self.prior.mean:g} and SD {self.prior.sd:g} ({words}; signs in the "
                "orientation of the table)",
                "the direct effects are independent of the sampling errors of the associations, "
                "which are approximately normal",
                f"IVW estimate with {self.core.order}-order weights and the {self.core.se_rule}-"
                "effect standard error held fixed at their values from the observed table"]

    def to_dict(self) -> dict:
        return {"prior": {"mean": self.prior.mean, "sd": self.prior.sd, "unit": self.prior.unit,
                          "text": self.prior.text()},
                "interval": self.interval.to_list(), "center": json_number(self.center),
                "sd": json_number(self.sd), "shift": json_number(self.shift),
                "spread": json_number(self.spread), "method": "closed-form",
                "estimate": json_number(self.core.estimate), "se": json_number(self.core.se),
                "weights": self.core.order, "se_rule": self.core.se_rule,
                "confidence_level": self.confidence_level, "threshold": self.threshold,
                "conclusion": self.conclusion, "region": self.region,
                "prior_map": self.prior_map.to_dict(),
                "assumptions": self.assumptions(), "caution": CAUTION}


def prior_interval(core: LinearIVW, shift: float, spread: float, mean, sd):
    """``(lower, upper, centre)`` of ``β̂ − μA ± z√(s² + τ²Q)``; broadcasts over arrays."""
    centre = core.estimate - np.asarray(mean, float) * shift
    half = core.z * np.sqrt(core.se ** 2 + (np.asarray(sd, float) * spread) ** 2)
    return centre - half, centre + half, centre


def _grid(core: LinearIVW, shift: float, spread: float, prior: NormalPrior,
          threshold: float, points: int) -> tuple[np.ndarray, np.ndarray]:
    """Means and SDs of the map (the rule of :func:`sensiv.sensitivity.prior.prior_map`):
    means span the given mean, zero and the mean that centres the interval on the threshold,
    SDs up to 1.5 times the larger of the given SD and the SD at which a prior centred at zero
    first reaches the threshold."""
    d = core.estimate - threshold
    anchors = [prior.mean, 0.0]
    reach = 0.0
    if shift != 0.0:
        anchors.append(d / shift)
    if spread > 0.0:
        reach = math.sqrt(max(d * d / core.z ** 2 - core.se ** 2, 0.0)) / spread
    low, high = min(anchors), max(anchors)
    pad = max(PRIOR_MAP_MARGIN * (high - low), PRIOR_MAP_SPREAD * prior.sd)
    if not pad > 0.0:
        pad = max(abs(low), core.se / abs(shift) if shift else 1.0, 1e-12)
    top = PRIOR_MAP_SD_REACH * max(prior.sd, reach)
    if not top > 0.0:
        top = pad
    return np.linspace(low - pad, high + pad, points), np.linspace(0.0, top, points)


def region_of(lower: float, upper: float, threshold: float, estimate: float) -> int:
    """``1`` kept (same side as the IVW estimate), ``0`` contains, ``-1`` reversed."""
    side = 1 if estimate >= threshold else -1
    if lower > threshold:
        return side
    if upper < threshold:
        return -side
    return 0


def prior_effects(assoc: Associations, prior: NormalPrior | str = "normal:0:1se", *,
                  threshold: float = 0.0, confidence_level: float = 0.95,
                  order: WeightOrder = "first", se: str = "fixed",
                  points: int = PRIOR_MAP_POINTS, focus: str = "exposure") -> PriorEffects:
    """The IVW interval under ``α_j ~ N(μ f_j, τ² f_j²)`` and the map over ``(μ, τ)``.

    Examples
    --------
    >>> from sensiv.sensitivity.associations import check_associations, ivw
    >>> a = check_associations(first_stage=[0.1, 0.2], first_stage_se=[0.01, 0.01],
    ...                        reduced_form=[0.05, 0.1], reduced_form_se=[0.01, 0.01])
    >>> r = prior_effects(a, "normal:0:0")
    >>> r.interval == ivw(a).ci_fixed
    True
    """
    prior = parse_normal_prior(prior) if isinstance(prior, str) else check_prior(prior)
    points = check_count(points, "--points", 2, 1001, "prior-map points per axis")
    if not math.isfinite(threshold):
        raise InputError(f"threshold {threshold} must be a finite number")
    core = linear_ivw(assoc, order, se, confidence_level)
    weights = core.slope * unit_factor(assoc, prior.unit)
    shift, spread = float(weights.sum()), float(np.sqrt(weights @ weights))
    low, high, centre = prior_interval(core, shift, spread, prior.mean, prior.sd)
    interval = Interval(float(low), float(high))
    means, sds = _grid(core, shift, spread, prior, threshold, points)
    lower, upper, _ = prior_interval(core, shift, spread, means[None, :], sds[:, None])
    excludes = (lower > threshold) | (upper < threshold)
    pmap = PriorMap(AXIS, float(threshold), means, sds, lower, upper, excludes,
                    (prior.mean, prior.sd), float(core.estimate))
    sd = math.sqrt(core.se ** 2 + (prior.sd * spread) ** 2)
    return PriorEffects(core, prior, float(threshold), interval, float(centre), sd, shift,
                        spread, conclusion_text(focus, core.interval(), threshold, False),
                        region_of(interval.low, interval.high, threshold, core.estimate), pmap)
