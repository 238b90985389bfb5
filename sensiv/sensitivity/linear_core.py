r"""The linear core of the focus coefficient: ``β̂(γ)`` and its variance as functions of ``γ``.

For a *known* direct effect ``γ``, 2SLS of ``y − Zγ`` gives, for the focus coefficient,

.. math::

    \hat β(γ) = \hat β - a'γ, \qquad a = [(X̂'X̂)^{-1} X̂'Z]_{\text{focus}},

and the residual ``u(γ) = û − Mγ`` is affine in ``γ``, so every variance (classic, robust,
cluster) is a quadratic ``q(γ) = [1, −γ'] Q [1, −γ']'`` whose ``(1+k_z)²`` coefficients come from
the same second pass over the rows as the fit.  This module builds ``(β̂, a, Q)`` — the
:class:`Core` — from a fit's pieces; everything downstream is evaluated from it alone.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from sensiv.core.errors import InputError
from sensiv.core.results import Interval
from sensiv.estimation import distributions as dist
from sensiv.estimation.covariance import small_factor
from sensiv.estimation import iv
from sensiv.estimation.moments import ScoreBlock, ScoreSums


@dataclass(frozen=True, slots=True)
class Core:
    """``β̂(γ) = estimate − slope'γ`` and ``Var β̂(γ) = [1, −γ'] quad [1, −γ']'``.

    ``critical`` is the two-sided Wald critical value used for every interval.
    """

    focus: str
    instruments: tuple[str, ...]
    estimate: float
    slope: np.ndarray
    quad: np.ndarray
    critical: float

    def beta(self, gammas: np.ndarray) -> np.ndarray:
        return self.estimate - np.atleast_2d(gammas) @ self.slope

    def variance(self, gammas: np.ndarray) -> np.ndarray:
        g = np.atleast_2d(gammas)
        q = self.quad
        out = q[0, 0] - 2.0 * g @ q[0, 1:] + np.einsum("ij,jk,ik->i", g, q[1:, 1:], g)
        return np.maximum(out, 0.0)

    def interval(self, gamma: np.ndarray) -> Interval:
        b = float(self.beta(gamma)[0])
        half = self.critical * math.sqrt(float(self.variance(gamma)[0]))
        return Interval(b - half, b + half)

    @property
    def se(self) -> float:
        return math.sqrt(float(self.quad[0, 0]))


def focus_index(treatments: Sequence[str], focus: str | None) -> int:
    """Position of the ``--focus`` treatment (the first when ``None``); InputError otherwise."""
    if focus is None:
        return 0
    if focus not in treatments:
        raise InputError(f"--focus '{focus}' is not a treatment; choose one of "
                         f"{', '.join(treatments)}")
    return treatments.index(focus)


def _slope_and_residual_maps(pieces: iv.Pieces, j: int) -> tuple[np.ndarray, np.ndarray]:
    """``a`` (k_z,) for treatment ``j`` and the row map ``[û, M]`` of ``u(γ) = û − Mγ``."""
    d = pieces.design
    fit = pieces.tsls
    full = fit.bread @ (fit.fitted.T @ pieces.gram @ d.z)      # (k_r, k_z)
    row = len(d.control_names) + j
    residual_maps = np.column_stack([fit.residual, d.z - d.regressors @ full])
    return full[row], residual_maps


def residual_maps(pieces: iv.Pieces) -> np.ndarray:
    """The row map ``[û, M]`` of the 2SLS residual ``u(γ) = û − Mγ`` (any treatment)."""
    return _slope_and_residual_maps(pieces, 0)[1]


def focus_block(pieces: iv.Pieces, j: int) -> ScoreBlock:
    """Pass-2 request for the robust/cluster variance quadratic of treatment ``j``."""
    _, maps = _slope_and_residual_maps(pieces, j)
    row = len(pieces.design.control_names) + j
    influence = pieces.tsls.fitted @ pieces.tsls.bread[:, row]
    return ScoreBlock("focus", influence[:, None], maps)


def build_core(pieces: iv.Pieces, sums: ScoreSums | None, result: iv.IVFit, j: int) -> Core:
    """The linear/quadratic core of the focus coefficient from the fit's moments and sums."""
    slope, maps = _slope_and_residual_maps(pieces, j)
    n = pieces.n
    k = pieces.tsls.params.size + pieces.absorbed_parameters
    se = result.se_type
    n_clusters = sums.n_clusters if sums is not None else None
    factor = small_factor(se, result.small, n, k, n_clusters)
    row = len(pieces.design.control_names) + j
    if se == "classic":
        quad = pieces.tsls.bread[row, row] * (maps.T @ pieces.gram @ maps) / n
    else:
        quad = sums.meats["focus"]
    quad = factor * quad
    return Core(pieces.design.treatments[j], pieces.design.instruments,
                float(result.tsls.value(pieces.design.treatments[j])), slope,
                0.5 * (quad + quad.T), result.critical_value())


def first_stage_is_uninformative(result: iv.IVFit, j: int) -> bool:
    """True when the focus treatment's first stage is not significant at the confidence level.

    Then the data cannot rule out a zero first stage, every valid confidence set for β must be
    unbounded (Dufour 1997), and the finite Wald arithmetic is reported only as a reference.
    """
    fs = result.first_stages[j]
    k_z = fs.f_df[0]
    if result.small:
        critical = dist.f_quantile(result.confidence_level, k_z, fs.f_df[1])
        return not fs.f > critical
    return not fs.f * k_z > dist.chi2_quantile(result.confidence_level, k_z)
