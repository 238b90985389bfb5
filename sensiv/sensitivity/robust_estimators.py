r"""Robust estimators from per-instrument associations, shown as yardsticks beside the bounds.

Each estimator relaxes the exclusion restriction in its own way; none proves an instrument
valid, and each rests on an assumption stated in :func:`ASSUMPTIONS`.  Notation as in
:mod:`sensiv.sensitivity.associations`: :math:`\hat b_{x,j}, s_{x,j}` the first stage,
:math:`\hat b_{y,j}, s_{y,j}` the reduced form, :math:`θ_j = \hat b_{y,j}/\hat b_{x,j}` the
ratio estimates with first- or second-order SEs :math:`σ_j`.

**MR-Egger** (Bowden, Davey Smith & Burgess 2015).  Orient every instrument so that
:math:`\hat b_{x,j} > 0` (flip the signs of both associations otherwise), then fit the weighted
regression with intercept

.. math::  \hat b_{y,j} = β_{0} + β_{E} \hat b_{x,j} + ε_j, \qquad \text{weights } s_{y,j}^{-2}.

The slope :math:`β_E` estimates the effect under InSIDE (instrument strength independent of the
direct effect); the intercept :math:`β_0` estimates the average directional pleiotropy (the
mean direct effect).  Residual-variance convention: the paper's multiplicative random-effects
model, i.e. the weighted least-squares covariance :math:`(X'WX)^{-1} \hat φ` with the residual
scale :math:`\hat φ = \sum_j w_j e_j^2/(J-2)` floored at 1 (under-dispersion is not allowed,
so the SEs are never below those of a known unit scale).  Intervals and p-values use Student's
t with :math:`J-2` degrees of freedom (common practice for a regression with an estimated
scale, no source).  Needs :math:`J \ge 3`.

**Weighted median** (Bowden, Davey Smith, Haycock & Burgess 2016).  Order the ratio estimates
:math:`θ_{(1)} \le … \le θ_{(J)}` with standardized weights :math:`w_{(j)}` (inverse variances
:math:`σ_j^{-2}` divided by their sum) and put :math:`p_j = \sum_{k \le j} w_{(k)} - w_{(j)}/2`.
With :math:`j^*` the largest *j* with :math:`p_j < 1/2`, the estimate is the interpolation

.. math::  \hat β_{WM} = θ_{(j^*)} + (θ_{(j^*+1)} - θ_{(j^*)})
           \frac{1/2 - p_{j^*}}{p_{j^*+1} - p_{j^*}}.

Its SE is the standard deviation of the estimate over a parametric bootstrap in which
:math:`\hat b_{x,j} \sim N(\hat b_{x,j}, s_{x,j}^2)` and :math:`\hat b_{y,j} \sim N(\hat
b_{y,j}, s_{y,j}^2)` are redrawn and the weights held fixed, as in the paper; the interval is
the estimate ± the normal quantile times that SE.  Consistent when instruments carrying at
least half the weight are valid.

**Mode-based estimate** (Hartwig, Davey Smith & Bowden 2017), weighted version.  The mode of
the weighted normal-kernel density of the ratio estimates,

.. math::  \hat f(x) = \sum_j w_j \frac{1}{h} φ\!\left(\frac{x - θ_j}{h}\right), \qquad
           h = φ_{bw}\, s\, J^{-1/5}, \quad s = 0.9 \min\{\mathrm{SD}(θ),\ 1.4826\,
           \mathrm{MAD}(θ)\},

the paper's modified Silverman rule with its bandwidth parameter :math:`φ_{bw}` (default 1;
smaller values give less bias and more variance); :math:`w_j` the standardized inverse
variances.  The maximum is located on a grid over the ratio estimates (exact density for the
estimate, FFT-binned density for the bootstrap rows) and refined with the exact density by
Newton / mean-shift steps to the local maximum (to about 1e-12 of a bandwidth).  SE: the paper's parametric
bootstrap :math:`θ_j^* \sim N(θ_j, σ_j^2)` with the weights fixed, summarised by the
median absolute deviation of the bootstrap estimates times 1.4826 (from memory of the paper's
code); interval estimate ± normal quantile × SE.  Consistent when the largest group of
instruments with the same ratio (the plurality, ZEMPA) is valid; it needs several instruments
whose ratio estimates agree, so it is reported only for :math:`J \ge 3`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from sensiv.core.errors import InputError
from sensiv.core.limits import MAX_REPS, check_count, check_seed
from sensiv.core.results import Interval, json_number
from sensiv.estimation import distributions as dist
from sensiv.sensitivity.associations import Associations, WeightOrder
from sensiv.sensitivity.kernel_mode import DEFAULT_PHI, MAD_SCALE, mode_bandwidth, mode_rows, mode_value

__all__ = ["ASSUMPTIONS", "Bootstrapped", "Egger", "Yardsticks", "egger", "mode_bandwidth",
           "mode_based", "mode_rows", "mode_value", "weighted_median", "weighted_median_rows",
           "weighted_median_value", "yardsticks"]

MIN_INSTRUMENTS = 3
"""Fewest instruments for any of the robust estimators (MR-Egger needs a residual degree of
freedom; a median or mode of two ratios is no yardstick)."""

DEFAULT_REPS = 1000
"""Bootstrap replicates of the weighted median and the mode-based estimate (the papers' 1000)."""

TITLES = {"egger": "MR-Egger slope", "weighted_median": "weighted median",
          "mode": "mode-based estimate"}

ASSUMPTIONS = {
    "egger": "InSIDE: the instruments' direct effects are independent of their first-stage "
             "strengths; the intercept is their average (directional pleiotropy)",
    "weighted_median": "instruments carrying at least half of the weight are valid",
    "mode": "the largest group of instruments with the same ratio estimate is valid (zero "
            "modal pleiotropy)",
}


@dataclass(frozen=True, slots=True)
class Egger:
    """MR-Egger slope and intercept with their SEs, intervals and p-values."""

    slope: float
    slope_se: float
    slope_ci: Interval
    slope_pvalue: float
    intercept: float
    intercept_se: float
    intercept_ci: Interval
    intercept_pvalue: float
    residual_scale: float
    df: int

    def to_dict(self) -> dict:
        return {"estimate": json_number(self.slope), "se": json_number(self.slope_se),
                "ci": self.slope_ci.to_list(), "pvalue": json_number(self.slope_pvalue),
                "intercept": json_number(self.intercept),
                "intercept_se": json_number(self.intercept_se),
                "intercept_ci": self.intercept_ci.to_list(),
                "intercept_pvalue": json_number(self.intercept_pvalue),
                "residual_scale": json_number(self.residual_scale), "df": self.df,
                "assumption": ASSUMPTIONS["egger"]}


@dataclass(frozen=True, slots=True)
class Bootstrapped:
    """A bootstrapped robust estimate (weighted median or mode-based)."""

    method: str
    estimate: float
    se: float
    ci: Interval
    reps: int
    seed: int
    phi: float | None = None

    def to_dict(self) -> dict:
        out = {"estimate": json_number(self.estimate), "se": json_number(self.se),
               "ci": self.ci.to_list(), "reps": self.reps, "seed": self.seed,
               "assumption": ASSUMPTIONS[self.method]}
        if self.phi is not None:
            out["phi"] = self.phi
        return out


@dataclass(frozen=True, slots=True)
class Yardsticks:
    """The robust estimates that could be computed, and why the others are not available."""

    egger: Egger | None
    weighted_median: Bootstrapped | None
    mode: Bootstrapped | None
    reasons: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        out = {}
        for key in ("egger", "weighted_median", "mode"):
            value = getattr(self, key)
            out[key] = (value.to_dict() if value is not None
                        else {"available": False, "reason": self.reasons.get(key, "")})
        return out


def _need(assoc: Associations, what: str) -> None:
    if assoc.count < MIN_INSTRUMENTS:
        raise InputError(f"{what} needs at least {MIN_INSTRUMENTS} instruments and the table "
                         f"has {assoc.count}; add instruments (for a single instrument use "
                         "published without --per-instrument)")


def egger(assoc: Associations, confidence_level: float = 0.95) -> Egger:
    """MR-Egger regression (module docstring); :class:`InputError` for fewer than 3 instruments.

    Examples
    --------
    >>> from sensiv.sensitivity.associations import check_associations
    >>> a = check_associations(first_stage=[1.0, -2.0, 3.0], first_stage_se=[0.1] * 3,
    ...                        reduced_form=[0.6, -1.1, 1.6], reduced_form_se=[0.1] * 3)
    >>> fit = egger(a)
    >>> round(fit.slope, 6), round(fit.intercept, 6)
    (0.5, 0.1)
    """
    _need(assoc, "MR-Egger")
    sign = np.sign(assoc.first_stage)
    bx, by = assoc.first_stage * sign, assoc.reduced_form * sign
    w = assoc.reduced_form_se ** -2.0
    design = np.column_stack([np.ones_like(bx), bx])
    gram = design.T @ (design * w[:, None])
    coef = np.linalg.solve(gram, design.T @ (w * by))
    resid = by - design @ coef
    df = assoc.count - 2
    scale = math.sqrt(float(w @ resid ** 2) / df)
    cov = np.linalg.inv(gram) * max(1.0, scale) ** 2
    se = np.sqrt(np.diag(cov))
    t = dist.t_quantile(0.5 + confidence_level / 2, df)

    def ci(k: int) -> Interval:
        return Interval(coef[k] - t * se[k], coef[k] + t * se[k])

    def pvalue(k: int) -> float:
        from scipy.special import stdtr

        return float(2 * stdtr(df, -abs(coef[k] / se[k])))

    return Egger(float(coef[1]), float(se[1]), ci(1), pvalue(1), float(coef[0]), float(se[0]),
                 ci(0), pvalue(0), scale, df)


def weighted_median_value(theta: np.ndarray, weights: np.ndarray) -> float:
    """The interpolated weighted median of ``theta`` (module docstring); ``weights`` > 0.

    Examples
    --------
    >>> weighted_median_value(np.array([1.0, 2.0, 3.0]), np.ones(3))
    2.0
    """
    order = np.argsort(theta, kind="stable")
    values = theta[order]
    w = weights[order] / weights.sum()
    p = np.cumsum(w) - w / 2
    below = int(np.flatnonzero(p < 0.5)[-1])
    return float(values[below] + (values[below + 1] - values[below])
                 * (0.5 - p[below]) / (p[below + 1] - p[below]))


def weighted_median_rows(theta: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """:func:`weighted_median_value` of every row of ``theta`` (the bootstrap draws)."""
    order = np.argsort(theta, axis=1, kind="stable")
    values = np.take_along_axis(theta, order, axis=1)
    w = weights[order] / weights.sum()
    p = np.cumsum(w, axis=1) - w / 2
    below = (p < 0.5).sum(axis=1) - 1
    rows = np.arange(theta.shape[0])
    lo, hi = values[rows, below], values[rows, below + 1]
    plo, phi = p[rows, below], p[rows, below + 1]
    return lo + (hi - lo) * (0.5 - plo) / (phi - plo)


def _check_bootstrap(reps, seed) -> tuple[int, int]:
    reps = check_count(reps, "--reps", 2, MAX_REPS, "bootstrap replicates")
    seed = check_seed(seed)
    if seed is None:
        seed = int(np.random.SeedSequence().generate_state(1)[0])
    return reps, seed


def weighted_median(assoc: Associations, order: WeightOrder = "first",
                    confidence_level: float = 0.95, reps: int = DEFAULT_REPS,
                    seed: int | None = None) -> Bootstrapped:
    """The weighted median with its parametric-bootstrap SE (module docstring)."""
    _need(assoc, "the weighted median")
    reps, seed = _check_bootstrap(reps, seed)
    weights = assoc.ratio_se(order) ** -2.0
    estimate = weighted_median_value(assoc.ratios, weights)
    rng = np.random.default_rng(seed)
    shape = (reps, assoc.count)
    bx = assoc.first_stage + assoc.first_stage_se * rng.standard_normal(shape)
    by = assoc.reduced_form + assoc.reduced_form_se * rng.standard_normal(shape)
    draws = weighted_median_rows(by / bx, weights)
    se = float(np.std(draws, ddof=1))
    z = dist.normal_quantile(0.5 + confidence_level / 2)
    return Bootstrapped("weighted_median", estimate, se,
                        Interval(estimate - z * se, estimate + z * se), reps, seed)


def mode_based(assoc: Associations, order: WeightOrder = "first",
               confidence_level: float = 0.95, reps: int = DEFAULT_REPS,
               seed: int | None = None, phi: float = DEFAULT_PHI) -> Bootstrapped:
    """The weighted mode-based estimate with its bootstrap SE (module docstring)."""
    _need(assoc, "the mode-based estimate")
    if not (isinstance(phi, (int, float)) and math.isfinite(phi) and phi > 0):
        raise InputError(f"the bandwidth parameter φ {phi!r} must be a positive number, "
                         "e.g. 1 (the paper's default) or 0.5")
    reps, seed = _check_bootstrap(reps, seed)
    theta, sigma = assoc.ratios, assoc.ratio_se(order)
    weights = sigma ** -2.0
    estimate = mode_value(theta, weights, phi)
    rng = np.random.default_rng(seed)
    draws = mode_rows(theta + sigma * rng.standard_normal((reps, theta.size)), weights, phi)
    se = MAD_SCALE * float(np.median(np.abs(draws - np.median(draws))))
    z = dist.normal_quantile(0.5 + confidence_level / 2)
    return Bootstrapped("mode", estimate, se, Interval(estimate - z * se, estimate + z * se),
                        reps, seed, phi=float(phi))


def yardsticks(assoc: Associations, order: WeightOrder = "first",
               confidence_level: float = 0.95, reps: int = DEFAULT_REPS,
               seed: int | None = None, phi: float = DEFAULT_PHI) -> Yardsticks:
    """All three robust estimates, or for fewer than 3 instruments the reason they are absent.

    The weighted median and the mode-based estimate draw from the same seed (each its own
    generator), so the seed reproduces both.
    """
    reps, seed = _check_bootstrap(reps, seed)
    if assoc.count < MIN_INSTRUMENTS:
        reason = (f"not available: needs at least {MIN_INSTRUMENTS} instruments, the table "
                  f"has {assoc.count}")
        return Yardsticks(None, None, None, {k: reason for k in ASSUMPTIONS})
    return Yardsticks(egger(assoc, confidence_level),
                      weighted_median(assoc, order, confidence_level, reps, seed),
                      mode_based(assoc, order, confidence_level, reps, seed, phi))
