"""Small dense linear-algebra kernels shared by the estimation layers.

Inner kernels: they trust their inputs (finite, correctly shaped) and never touch rows.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from sensiv.core.results import Interval

# A column whose variance left after partialling out the earlier columns is below this share
# of its own variance is treated as an exact linear combination of them.
COLLINEAR_SHARE = 1e-10
# Eigenvalues whose imaginary part is below this (relative) are treated as real.
REAL_ROOT_TOL = 1e-7


@dataclass(frozen=True, slots=True)
class ScaledCholesky:
    """Cholesky factor of a Gram matrix after scaling its columns to unit length.

    ``G = D L L' D`` with ``D = diag(scale)``; ``shares[j] = L[j, j]²`` is the share of column
    ``j``'s sum of squares not explained by the earlier columns.
    """

    factor: np.ndarray
    scale: np.ndarray

    def solve(self, rhs: np.ndarray) -> np.ndarray:
        """``G⁻¹ rhs``."""
        from scipy.linalg import cho_solve

        rhs = np.asarray(rhs, dtype=float)
        scaled = rhs / (self.scale if rhs.ndim == 1 else self.scale[:, None])
        out = cho_solve((self.factor, True), scaled)
        return out / (self.scale if rhs.ndim == 1 else self.scale[:, None])

    def whiten(self, rhs: np.ndarray) -> np.ndarray:
        """``L⁻¹ D⁻¹ rhs``, so that ``whiten(a)' whiten(b) = a' G⁻¹ b``."""
        from scipy.linalg import solve_triangular

        rhs = np.asarray(rhs, dtype=float)
        scaled = rhs / (self.scale if rhs.ndim == 1 else self.scale[:, None])
        return solve_triangular(self.factor, scaled, lower=True)


def first_dependent_column(gram: np.ndarray) -> tuple[int, float] | None:
    """Index and remaining share of the first column that is (nearly) a combination of earlier ones.

    Returns ``None`` when every column keeps more than :data:`COLLINEAR_SHARE` of its sum of
    squares after partialling out the columns before it.
    """
    diag = np.diag(gram).copy()
    k = gram.shape[0]
    for j in range(k):
        if not diag[j] > 0:
            return j, 0.0
    scale = np.sqrt(diag)
    g = gram / np.outer(scale, scale)
    factor = np.zeros_like(g)
    for j in range(k):
        v = g[j:, j] - factor[j:, :j] @ factor[j, :j]
        share = v[0]
        if not share > COLLINEAR_SHARE:
            return j, float(max(share, 0.0))
        factor[j:, j] = v / np.sqrt(share)
    return None


def scaled_cholesky(gram: np.ndarray) -> ScaledCholesky:
    """Cholesky factor of a positive-definite Gram matrix, with column scaling.

    The caller checks full rank first with :func:`first_dependent_column`.
    """
    scale = np.sqrt(np.diag(gram))
    g = gram / np.outer(scale, scale)
    return ScaledCholesky(np.linalg.cholesky(g), scale)


def sym_inv_psd(matrix: np.ndarray) -> np.ndarray:
    """Inverse of a symmetric positive-definite matrix via a scaled Cholesky factor."""
    chol = scaled_cholesky(matrix)
    return chol.solve(np.eye(matrix.shape[0]))


def wald_statistic(estimate: np.ndarray, covariance: np.ndarray) -> float:
    """``b' V⁻¹ b`` computed through a Cholesky factor (``inf`` when V is singular)."""
    estimate = np.atleast_1d(estimate)
    covariance = np.atleast_2d(covariance)
    if first_dependent_column(covariance) is not None:
        return float("inf")
    z = scaled_cholesky(covariance).whiten(estimate)
    return float(z @ z)


def quadratic_ratio_set(a0: np.ndarray, a1: np.ndarray, v00: np.ndarray, v01: np.ndarray,
                        v11: np.ndarray, critical: float) -> tuple[Interval, ...]:
    r"""Exact set of scalars ``b`` with ``a(b)' V(b)⁻¹ a(b) ≤ critical``.

    .. math::

        a(b) = a_0 - b\,a_1, \qquad
        V(b) = V_{00} - b\,(V_{01} + V_{01}') + b^2 V_{11},

    which is the Anderson–Rubin acceptance region when ``a`` stacks reduced-form minus ``b``
    times first-stage coefficients.  With ``V(b)`` positive definite the statistic exceeds the
    critical value exactly where ``det [[V(b), a(b)], [a(b)', critical]] < 0`` (Schur
    complement).  That determinant is a polynomial of degree at most ``2k``; its real roots are
    the finite eigenvalues of the companion linearisation of the quadratic matrix polynomial,
    and the sign between roots is read off at test points.  No grid.

    Parameters
    ----------
    a0, a1 : ndarray, shape (k,)
    v00, v01, v11 : ndarray, shape (k, k)
        ``Cov(a0)``, ``Cov(a0, a1)``, ``Cov(a1)``.
    critical : float

    Returns
    -------
    tuple of Interval
        Disjoint, sorted pieces; empty when no ``b`` is accepted; ends may be infinite.

    Examples
    --------
    >>> import numpy as np
    >>> s = quadratic_ratio_set(np.array([2.0]), np.array([1.0]), np.eye(1) * 0.01,
    ...                         np.zeros((1, 1)), np.eye(1) * 0.0001, 3.84)
    >>> [round(p.low, 3) for p in s], [round(p.high, 3) for p in s]
    ([1.801], [2.201])
    """
    a0 = np.atleast_1d(np.asarray(a0, float))
    a1 = np.atleast_1d(np.asarray(a1, float))
    center, spread, quad = _standardised(a0, a1, v00, v01, v11)

    def statistic(t: float) -> float:
        return wald_statistic(quad.a(t), quad.v(t))

    roots = _determinant_roots(quad, critical)
    if roots.size == 0:
        accepted = statistic(0.0) <= critical
        return (Interval(-np.inf, np.inf),) if accepted else ()
    return tuple(Interval(center + spread * lo if np.isfinite(lo) else lo,
                          center + spread * hi if np.isfinite(hi) else hi)
                 for lo, hi in _accepted_pieces(roots, statistic, critical))


@dataclass(frozen=True, slots=True)
class _RatioQuadratic:
    """``a(t) = α₀ − t α₁`` and ``V(t) = V_c − t W₁ + t² W₂`` in the standardised variable
    ``t = (b − center) / spread``."""

    alpha0: np.ndarray
    alpha1: np.ndarray
    v_c: np.ndarray
    w1: np.ndarray
    w2: np.ndarray

    def a(self, t: float) -> np.ndarray:
        return self.alpha0 - t * self.alpha1

    def v(self, t: float) -> np.ndarray:
        return self.v_c - t * self.w1 + t * t * self.w2


def _standardised(a0: np.ndarray, a1: np.ndarray, v00: np.ndarray, v01: np.ndarray,
                  v11: np.ndarray) -> tuple[float, float, _RatioQuadratic]:
    """Centre ``b`` at the least-squares ratio and scale it by the spread there, so the roots
    are of order one whatever the units of ``a0`` and ``a1``."""
    s01 = v01 + v01.T
    denom = float(a1 @ a1)
    center = float(a1 @ a0) / denom if denom > 0 else 0.0
    v_c = v00 - center * s01 + center**2 * v11
    spread = np.sqrt(max(np.trace(v_c), np.finfo(float).tiny) / denom) if denom > 0 else 1.0
    # b = center + spread * t; every coefficient below is in t.  Dividing a(t) by ``unit`` and
    # V(t) by its square leaves the statistic a'V⁻¹a unchanged and puts both blocks of the
    # bordered matrix on the scale of the critical value, whatever the outcome's unit.
    unit = math.sqrt(float(np.trace(v_c))) if np.trace(v_c) > 0 else 1.0
    quad = _RatioQuadratic(alpha0=(a0 - center * a1) / unit, alpha1=spread * a1 / unit,
                           v_c=v_c / unit**2, w1=spread * (s01 - 2.0 * center * v11) / unit**2,
                           w2=spread**2 * v11 / unit**2)
    return center, spread, quad


def _determinant_roots(quad: _RatioQuadratic, critical: float) -> np.ndarray:
    """Sorted distinct real roots in ``t`` of ``det [[V(t), a(t)], [a(t)', critical]]``.

    The bordered matrix is the quadratic matrix polynomial ``M₀ + t M₁ + t² M₂``; its roots are
    the finite eigenvalues of the companion pencil ``(A, B)``.
    """
    from scipy.linalg import eigvals

    k = quad.alpha0.size
    m = k + 1
    m0 = np.zeros((m, m))
    m0[:k, :k] = quad.v_c
    m0[:k, k] = m0[k, :k] = quad.alpha0
    m0[k, k] = critical
    m1 = np.zeros((m, m))
    m1[:k, :k] = -quad.w1
    m1[:k, k] = m1[k, :k] = -quad.alpha1
    m2 = np.zeros((m, m))
    m2[:k, :k] = quad.w2
    eye = np.eye(m)
    big_a = np.block([[np.zeros((m, m)), eye], [-m0, -m1]])
    big_b = np.block([[eye, np.zeros((m, m))], [np.zeros((m, m)), m2]])
    with np.errstate(divide="ignore", invalid="ignore"):
        eig = eigvals(big_a, big_b)
    finite = eig[np.isfinite(eig)]
    real = finite[np.abs(finite.imag) <= REAL_ROOT_TOL * (1.0 + np.abs(finite.real))].real
    return np.unique(np.round(np.sort(real), 14))


def _accepted_pieces(roots: np.ndarray, statistic: Callable[[float], float],
                     critical: float) -> list[list[float]]:
    """The intervals between consecutive roots (and beyond the outer ones) where the statistic
    is at most ``critical``, read off at one test point each; touching intervals are merged."""
    tests = [roots[0] - 1.0 - abs(roots[0])]
    tests += list(0.5 * (roots[:-1] + roots[1:]))
    tests.append(roots[-1] + 1.0 + abs(roots[-1]))
    accept = [statistic(t) <= critical for t in tests]
    edges = [-np.inf, *roots.tolist(), np.inf]
    pieces: list[list[float]] = []
    for j, ok in enumerate(accept):
        if not ok:
            continue
        lo, hi = edges[j], edges[j + 1]
        if pieces and pieces[-1][1] == lo:
            pieces[-1][1] = hi
        else:
            pieces.append([lo, hi])
    return pieces
