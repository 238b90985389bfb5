"""One 2SLS (or OLS) solve from the weighted Gram matrix of the augmented centred rows.

The solve is a least-squares problem in whitened instrument space, by QR with columns scaled to
unit length; no explicit inverse of a cross-product matrix is formed.  The result keeps the row
maps of the fitted regressors and of the residual, from which every covariance is built.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from sensiv.core.errors import InputError
from sensiv.estimation import linalg


@dataclass(frozen=True, slots=True)
class LinearFit:
    """A 2SLS (or OLS, when instruments = regressors) solve in augmented coordinates.

    ``params`` are in solving coordinates; ``bread = (X̂'X̂)⁻¹``; ``fitted`` maps rows to
    ``X̂``; ``residual`` maps rows to ``û``.
    """

    params: np.ndarray
    bread: np.ndarray
    fitted: np.ndarray
    residual: np.ndarray
    instrument_chol: linalg.ScaledCholesky


def solve_linear(gram: np.ndarray, y: np.ndarray, regressors: np.ndarray,
                 instruments: np.ndarray) -> LinearFit:
    r"""2SLS from the weighted Gram matrix ``M`` of the augmented rows.

    .. math::

        \hat θ = (R'P_Q R)^{-1} R'P_Q y, \qquad P_Q = Q(Q'Q)^{-1}Q'

    computed as a least-squares problem ``L⁻¹Q'R θ ≈ L⁻¹Q'y`` (``Q'Q = LL'``) by QR, with
    columns scaled to unit length; no explicit inverse of a cross-product matrix.
    """
    from scipy.linalg import solve_triangular

    qq = instruments.T @ gram @ instruments
    chol = linalg.scaled_cholesky(qq)
    c = chol.whiten(instruments.T @ gram @ regressors)
    h = chol.whiten(instruments.T @ gram @ y)
    r_scale = np.sqrt(np.sum(c * c, axis=0))
    if np.any(r_scale == 0):
        raise InputError("the instruments are orthogonal to a regressor in these data, so it "
                         "is not identified; check the instruments")
    q_fac, r_fac = np.linalg.qr(c / r_scale)
    if np.min(np.abs(np.diag(r_fac))) < math.sqrt(linalg.COLLINEAR_SHARE):
        raise InputError("the first stage is rank deficient: the instruments do not move the "
                         "treatments independently of each other; add or change instruments")
    params = solve_triangular(r_fac, q_fac.T @ h) / r_scale
    r_inv = solve_triangular(r_fac, np.eye(r_fac.shape[0]))
    bread = (r_inv @ r_inv.T) / np.outer(r_scale, r_scale)
    projection = chol.solve(instruments.T @ gram @ regressors)
    fitted = instruments @ projection
    residual = y - regressors @ params
    return LinearFit(params, 0.5 * (bread + bread.T), fitted, residual, chol)
