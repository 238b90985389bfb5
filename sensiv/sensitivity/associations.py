r"""Per-instrument summary associations and the inverse-variance weighted (IVW) estimate.

A many-instrument study (Mendelian randomisation, many lottery arms) often publishes, for each
instrument :math:`j = 1..J`, its association with the treatment (the first stage,
:math:`\hat b_{x,j}` with SE :math:`s_{x,j}`) and with the outcome (the reduced form,
:math:`\hat b_{y,j}` with SE :math:`s_{y,j}`), possibly from two samples.  With a direct effect
:math:`α_j` of instrument *j* on the outcome, :math:`b_{y,j} = β b_{x,j} + α_j`.

The IVW estimate pools the ratio estimates :math:`θ_j = \hat b_{y,j}/\hat b_{x,j}`:

.. math::

    \hat β_{IVW} = \frac{\sum_j w_j θ_j}{\sum_j w_j}, \qquad
    w_j = 1/σ_j^2,

with first-order :math:`σ_j = s_{y,j}/|\hat b_{x,j}|` (then :math:`\hat β_{IVW} =
\sum b_x b_y s_y^{-2} / \sum b_x^2 s_y^{-2}`, the weighted regression of :math:`b_y` on
:math:`b_x` through the origin) or second-order
:math:`σ_j^2 = s_{y,j}^2/b_{x,j}^2 + b_{y,j}^2 s_{x,j}^2/b_{x,j}^4` (the delta method, first-
and reduced-form estimates taken as independent, as with two samples).  Fixed-effect SE
:math:`(\sum w_j)^{-1/2}`; Cochran's :math:`Q = \sum w_j (θ_j - \hat β)^2`, χ²(J − 1) under
homogeneity; the multiplicative random-effects SE scales the fixed-effect SE by
:math:`\sqrt{\max(1, Q/(J-1))}` (Burgess, Butterworth & Thompson 2013 use the IVW regression's
residual standard error; the floor at 1 is common practice, no source).  Intervals use the
normal quantile (common practice, no source).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal, Sequence

import numpy as np

from sensiv.core.errors import InputError
from sensiv.core.results import Interval, json_number
from sensiv.estimation import distributions as dist

WeightOrder = Literal["first", "second"]
WEIGHT_ORDERS: tuple[str, ...] = ("first", "second")


@dataclass(frozen=True, slots=True)
class Associations:
    """Validated per-instrument associations, each array of shape ``(J,)``."""

    names: tuple[str, ...]
    first_stage: np.ndarray
    first_stage_se: np.ndarray
    reduced_form: np.ndarray
    reduced_form_se: np.ndarray

    @property
    def count(self) -> int:
        return len(self.names)

    @property
    def ratios(self) -> np.ndarray:
        """The per-instrument ratio (Wald) estimates :math:`b_y/b_x`."""
        return self.reduced_form / self.first_stage

    def ratio_se(self, order: WeightOrder = "first") -> np.ndarray:
        """First- or second-order standard errors of the ratio estimates."""
        bx, by = self.first_stage, self.reduced_form
        first = (self.reduced_form_se / bx) ** 2
        if order == "first":
            return np.sqrt(first)
        return np.sqrt(first + (by * self.first_stage_se) ** 2 / bx ** 4)

    def to_dict(self) -> dict:
        return {"names": list(self.names),
                "first_stage": self.first_stage.tolist(),
                "first_stage_se": self.first_stage_se.tolist(),
                "reduced_form": self.reduced_form.tolist(),
                "reduced_form_se": self.reduced_form_se.tolist()}


def _column(role: str, values, count: int | None, *, positive: bool) -> np.ndarray:
    try:
        array = np.asarray(values, dtype=float).reshape(-1)
    except (TypeError, ValueError) as exc:
        raise InputError(f"the {role} column holds values that are not numbers; give one "
                         "number per instrument") from exc
    if count is not None and array.size != count:
        raise InputError(f"the {role} column has {array.size} values for {count} instruments; "
                         "give one per instrument")
    bad = np.flatnonzero(~np.isfinite(array))
    if bad.size:
        raise InputError(f"the {role} of instrument {int(bad[0]) + 1} is missing or not finite; "
                         "fill it in or drop that instrument")
    if positive:
        bad = np.flatnonzero(~(array > 0))
        if bad.size:
            raise InputError(f"the {role} of instrument {int(bad[0]) + 1} is "
                             f"{array[bad[0]]:g}; a standard error must be > 0")
    return array


def check_associations(*, first_stage, first_stage_se, reduced_form, reduced_form_se,
                       names: Sequence[str] | None = None) -> Associations:
    """Validate per-instrument associations (the caller's mistakes raise :class:`InputError`).

    Examples
    --------
    >>> a = check_associations(first_stage=[0.1, 0.2], first_stage_se=[0.01, 0.02],
    ...                        reduced_form=[0.05, 0.09], reduced_form_se=[0.02, 0.02])
    >>> a.names, a.ratios.round(2).tolist()
    (('1', '2'), [0.5, 0.45])
    """
    bx = _column("first-stage association", first_stage, None, positive=False)
    if bx.size == 0:
        raise InputError("the table has no instruments; give one row per instrument")
    count = bx.size
    sx = _column("first-stage SE", first_stage_se, count, positive=True)
    by = _column("reduced-form association", reduced_form, count, positive=False)
    sy = _column("reduced-form SE", reduced_form_se, count, positive=True)
    labels = tuple(str(i + 1) for i in range(count)) if names is None else tuple(map(str, names))
    if len(labels) != count:
        raise InputError(f"{len(labels)} names for {count} instruments; give one per instrument")
    zero = np.flatnonzero(bx == 0.0)
    if zero.size:
        raise InputError(f"the first-stage association of instrument '{labels[zero[0]]}' is 0: "
                         "it does not move the treatment and its ratio estimate is undefined; "
                         "drop it or check the value")
    if len(set(labels)) != count:
        raise InputError("instrument names repeat; give each instrument a distinct name")
    return Associations(labels, bx, sx, by, sy)


@dataclass(frozen=True, slots=True)
class IVW:
    """The inverse-variance weighted estimate with fixed- and random-effects SEs and Q."""

    order: str
    estimate: float
    se_fixed: float
    se_random: float
    q: float | None
    q_df: int
    q_pvalue: float | None
    confidence_level: float
    ci_fixed: Interval
    ci_random: Interval
    weights: np.ndarray

    def to_dict(self) -> dict:
        return {"weights": self.order, "estimate": json_number(self.estimate),
                "se_fixed": json_number(self.se_fixed), "se_random": json_number(self.se_random),
                "ci_fixed": self.ci_fixed.to_list(), "ci_random": self.ci_random.to_list(),
                "cochran_q": json_number(self.q), "q_df": self.q_df,
                "q_pvalue": json_number(self.q_pvalue),
                "confidence_level": self.confidence_level}


def ivw(assoc: Associations, order: WeightOrder = "first",
        confidence_level: float = 0.95) -> IVW:
    """The IVW estimate (module docstring) with ``order`` weights.

    Examples
    --------
    >>> a = check_associations(first_stage=[1.0, 2.0], first_stage_se=[0.1, 0.1],
    ...                        reduced_form=[0.5, 1.0], reduced_form_se=[0.1, 0.1])
    >>> fit = ivw(a)
    >>> round(fit.estimate, 6), round(fit.q, 6)
    (0.5, 0.0)
    """
    if order not in WEIGHT_ORDERS:
        raise InputError(f"weights {order!r} is not one of {', '.join(WEIGHT_ORDERS)}")
    theta = assoc.ratios
    weights = 1.0 / assoc.ratio_se(order) ** 2
    total = float(weights.sum())
    estimate = float(weights @ theta / total)
    se_fixed = 1.0 / math.sqrt(total)
    df = assoc.count - 1
    if df >= 1:
        q = float(weights @ (theta - estimate) ** 2)
        q_pvalue = dist.chi2_sf(q, df)
        se_random = se_fixed * math.sqrt(max(1.0, q / df))
    else:
        q, q_pvalue, se_random = None, None, se_fixed
    z = dist.normal_quantile(0.5 + confidence_level / 2)
    return IVW(order, estimate, se_fixed, se_random, q, df, q_pvalue, confidence_level,
               Interval(estimate - z * se_fixed, estimate + z * se_fixed),
               Interval(estimate - z * se_random, estimate + z * se_random), weights)
