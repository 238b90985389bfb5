r"""Partial correlations and the closed-form pieces of the correlation-restriction bounds.

Everything here is in standardised units: ``ρ`` are partial correlations (the controls ``W``
partialled out) and ``b = β σ_X / σ_y``.  For a fixed sign ``s`` of ``corr(X, u)`` every
condition of the restriction is linear in ``b`` (see :mod:`sensiv.partial_id.correlation`),

.. math::

    s(ρ_{xy} − b) ≥ 0,\qquad 0 ≤ s(ρ_{z_k y} − b ρ_{z_k x}) ≤ \bar r\, s(ρ_{xy} − b),

so this module owns the moments-to-correlations map (:func:`partial_correlations`), the
one-instrument closed form (:func:`one_instrument_piece`) and the exact one-variable
elimination of the constraint rows (:func:`eliminate`) that the bootstrap uses instead of the
cvxpy programmes.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from sensiv.core.results import Interval
from sensiv.estimation import linalg
from sensiv.estimation.design import build_design
from sensiv.estimation.moments import Moments

# Partialled standard deviation below this share of the raw one: the column is explained by
# the controls.
EXPLAINED_SHARE = 1e-12


# ----------------------------------------------------------------------------- moments
@dataclass(frozen=True, slots=True)
class PartialCorrelations:
    """Partial correlations (controls partialled out) that the bounds depend on.

    Attributes
    ----------
    xy : float
        ``corr(X, y)``.
    zy, zx : ndarray, shape (K,)
        ``corr(Z_k, y)`` and ``corr(Z_k, X)``.
    scale : float
        ``σ_y / σ_X``: a coefficient in standardised units times ``scale`` is ``β``.
    """

    xy: float
    zy: np.ndarray
    zx: np.ndarray
    scale: float


def partial_correlations(moments: Moments, layout) -> PartialCorrelations | None:
    """Partial correlations of ``[y, X, Z]`` given the controls, from moments only.

    Uses the design maps of :func:`sensiv.estimation.design.build_design` on the augmented
    centred rows, so the constant, numeric and indicator controls are handled exactly as in
    the 2SLS fit.  Returns ``None`` when a partialled standard deviation is zero or not finite
    (a degenerate bootstrap replicate); the boundary checks of
    :func:`sensiv.estimation.iv.prepare` run before this on the original data.
    """
    design = build_design(moments, layout.outcome, layout.treatments, layout.instruments,
                          layout.controls, layout.constant)
    gram = moments.augmented
    maps = np.column_stack([design.y, design.x[:, 0], design.z])
    raw_var = np.diag(maps.T @ gram @ maps).copy()
    w = design.w
    with np.errstate(all="ignore"):
        try:
            if w.shape[1]:
                maps = maps - w @ linalg.scaled_cholesky(w.T @ gram @ w).solve(
                    w.T @ gram @ maps)
        except np.linalg.LinAlgError:
            return None
        cov = maps.T @ gram @ maps
        var = np.diag(cov)
        if not (np.all(np.isfinite(cov)) and np.all(var > EXPLAINED_SHARE**2 * raw_var)):
            return None
        sd = np.sqrt(var)
        corr = cov / np.outer(sd, sd)
    return PartialCorrelations(float(corr[0, 1]), corr[2:, 0].copy(), corr[2:, 1].copy(),
                               float(sd[0] / sd[1]))


# ----------------------------------------------------------------------------- closed form
def one_instrument_piece(corr_xy: float, corr_zy: float, corr_zx: float, max_ratio: float,
                         sign: int) -> Interval | None:
    r"""Closed-form sign-``s`` piece of the set for one instrument, in standardised units.

    With ``a = ρ_zy``, ``b = ρ_zx``, ``c = ρ_xy`` and ``β(λ) = (a − λc)/(b − λ)``,

    .. math::

        \{β(λ) : λ ∈ [0, \bar r],\ s\,(cb − a)/(b − λ) ≥ 0\}, \qquad
        β'(λ) = (a − cb)/(b − λ)^2 .

    The sign condition is ``s·(c − β(λ)) ≥ 0``.  If ``s(cb − a) > 0`` the admissible ``λ`` lie
    below the pole ``b`` (none if ``b ≤ 0``); if ``s(cb − a) < 0`` above it.  When the pole
    falls inside ``[0, r̄]`` the piece is a half-line running to ``−s·∞`` (from the side of
    ``c``, the OLS estimate, away from it).  ``cb = a`` (OLS = 2SLS) is degenerate and handled
    separately.  Returns ``None`` for an empty piece; multiply by ``σ_y/σ_X`` for ``β``.

    Examples
    --------
    >>> one_instrument_piece(0.5, 0.1, 0.4, 0.0, 1)      # r̄ = 0: the 2SLS estimate a/b
    Interval(low=0.25, high=0.25)
    >>> one_instrument_piece(0.5, 0.1, 0.4, 0.2, 1)      # pole 0.4 outside [0, 0.2]
    Interval(low=0.0, high=0.25)
    >>> one_instrument_piece(0.5, 0.1, 0.4, 0.5, 1)      # pole 0.4 inside [0, 0.5]
    Interval(low=-inf, high=0.25)
    >>> one_instrument_piece(0.5, 0.1, 0.4, 0.0, -1) is None   # 2SLS < OLS rules out s < 0
    True
    """
    a, b, c, s = corr_zy, corr_zx, corr_xy, sign
    inf = math.inf
    gap = s * (c * b - a)
    if gap == 0.0:
        # β(λ) = c for every λ ≠ b, and at λ = b every β with s(c − β) ≥ 0 solves the ratio.
        if 0.0 <= b <= max_ratio:
            return Interval(-inf, c) if s > 0 else Interval(c, inf)
        return Interval(c, c)

    def beta(lam: float) -> float:
        return (a - lam * c) / (b - lam)

    if gap > 0:  # λ < b
        if b <= 0.0:
            return None
        if max_ratio < b:
            ends = (beta(0.0), beta(max_ratio))
            return Interval(min(ends), max(ends))
        far = -s * inf
        return Interval(min(beta(0.0), far), max(beta(0.0), far))
    # gap < 0: λ > b
    if max_ratio <= b:
        return None
    if b < 0.0:
        ends = (beta(0.0), beta(max_ratio))
        return Interval(min(ends), max(ends))
    far = -s * inf
    return Interval(min(beta(max_ratio), far), max(beta(max_ratio), far))


# ----------------------------------------------------------------------------- elimination
def constraint_rows(pc: PartialCorrelations, sign: int,
                    ratio: float) -> tuple[np.ndarray, np.ndarray]:
    """The bound programme's constraints as rows ``α b ≤ γ`` in standardised units.

    Row 0 is the sign of ``corr(X, u)``, rows ``1 … K`` the "same sign" condition of each
    instrument and rows ``K+1 … 2K`` its "at most ``ratio`` times as strong" condition;
    ``α`` and ``γ`` have shape ``(1 + 2K,)``.
    """
    s = float(sign)
    alpha = np.concatenate([[s], s * pc.zx, -s * (pc.zx - ratio)])
    gamma = np.concatenate([[s * pc.xy], s * pc.zy, -s * (pc.zy - ratio * pc.xy)])
    return alpha, gamma


def eliminate(pc: PartialCorrelations, sign: int, ratio: float) -> tuple[float, float] | None:
    """Exact solution of both bound programmes by eliminating the single unknown.

    A linear programme in one variable ``b`` with rows ``α_i b ≤ γ_i`` has the feasible set
    ``[max_{α_i<0} γ_i/α_i, min_{α_i>0} γ_i/α_i]`` (empty if a row with ``α_i = 0`` has
    ``γ_i < 0`` or the ends cross).  Used for the bootstrap replicates, where thousands of
    solves through cvxpy would dominate the run time; the tests check it against the
    programmes.  Returns ``(low, high)`` in standardised units or ``None`` when empty.
    """
    alpha, gamma = constraint_rows(pc, sign, ratio)
    if np.any((alpha == 0.0) & (gamma < 0.0)):
        return None
    with np.errstate(divide="ignore", invalid="ignore"):
        ends = gamma / alpha
    below, above = alpha < 0.0, alpha > 0.0
    low = float(np.max(ends[below])) if below.any() else -math.inf
    high = float(np.min(ends[above])) if above.any() else math.inf
    if low > high:
        return None
    return low, high
