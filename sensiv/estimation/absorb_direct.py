r"""Several absorbed fixed effects solved directly when all but the largest have few levels.

Write ``D_b`` for the indicators of the fixed effect with the most levels, ``D_R`` for those of
all the others side by side (``L_R`` columns), ``W`` for the row weights and
``M_b = I − D_b (D_b'WD_b)⁻¹ D_b'W`` for demeaning by ``D_b``.  By Frisch–Waugh–Lovell the
residual of a column ``x`` on ``[D_b, D_R]`` is

    r = M_b x − M_b D_R β,    (D_R' W M_b D_R) β = D_R' W M_b x,

an ``L_R × L_R`` system whose matrix needs no row-sized work beyond cross-tabulations:
``D_R'WD_R`` (a diagonal of level weight sums per fixed effect, cross-tabulations between
them) minus ``C' diag(1/t_b) C`` with ``C = D_b'WD_R`` the weighted cross-tabulation of the
largest fixed effect against the others and ``t_b`` its level weight sums; and
``M_b D_R β = D_R β − D_b (Cβ / t_b)``.  So each column costs one demeaning by ``D_b``, one
group sum per other fixed effect and the same number of look-ups — about one sweep of
alternating projections instead of the several that their accelerated iteration takes.

The matrix is singular (one null direction per connected component of the levels, and any
further redundancy of the indicators); it is inverted on its eigenvectors whose eigenvalue
exceeds :data:`EIGEN_CUTOFF` times the largest level weight sum, which gives the unique projection when the
discarded directions are the exact null space.  Whether that held is not assumed: the caller
(:func:`sensiv.estimation.absorb.demean_columns`) starts its alternating projections from this
solution and stops only when a sweep changes it by less than the tolerance (common practice of
checking a direct solve by the iteration it replaces, no source).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

DIRECT_LEVELS = 2_000
"""Largest ``L_R`` (levels of all fixed effects but the largest) solved directly."""

DENSE_CROSS = 4_000_000
"""Largest ``(levels of the largest) × L_R`` held as a dense cross-tabulation (else sparse)."""

EIGEN_CUTOFF = 1e-10
"""Eigenvalues of the ``L_R × L_R`` matrix below this share of its largest possible one (the
largest level weight sum of the other fixed effects) are treated as 0."""


@dataclass(frozen=True, slots=True)
class DirectPlan:
    """What the direct solve needs for every column (built once per design)."""

    big_codes: np.ndarray
    big_totals: np.ndarray
    small_codes: tuple[np.ndarray, ...]
    small_levels: tuple[int, ...]
    cross: object  # (levels of the largest) × L_R, dense or scipy.sparse CSR: D_b'WD_R
    basis: np.ndarray  # eigenvectors kept, L_R × r
    inverse_values: np.ndarray  # 1 / their eigenvalues, (r,)
    big: int  # index of the largest fixed effect among those given


def _totals(codes: np.ndarray, n_levels: int, weights: np.ndarray | None) -> np.ndarray:
    if weights is None:
        return np.bincount(codes, minlength=n_levels).astype(np.float64)
    return np.bincount(codes, weights=weights, minlength=n_levels)


def _rest_gram(codes: Sequence[np.ndarray], levels: Sequence[int],
               weights: np.ndarray | None) -> np.ndarray:
    """``D_R'WD_R``: level weight sums on the diagonal blocks, cross-tabulations off them."""
    offsets = np.concatenate([[0], np.cumsum(levels)])
    gram = np.zeros((offsets[-1], offsets[-1]))
    for k, (c_k, n_k) in enumerate(zip(codes, levels)):
        block = slice(offsets[k], offsets[k + 1])
        gram[block, block] = np.diag(_totals(c_k, n_k, weights))
        for m in range(k + 1, len(codes)):
            n_m = levels[m]
            table = np.bincount(c_k * n_m + codes[m], weights=weights,
                                minlength=n_k * n_m).reshape(n_k, n_m)
            other = slice(offsets[m], offsets[m + 1])
            gram[block, other] = table
            gram[other, block] = table.T
    return gram


def direct_plan(codes: Sequence[np.ndarray], levels: Sequence[int],
                weights: np.ndarray | None, limit: int = DIRECT_LEVELS) -> DirectPlan | None:
    """The plan of the direct solve, or ``None`` when the other fixed effects have more than
    ``limit`` levels together (alternating projections alone then)."""
    from scipy import sparse
    from scipy.linalg import eigh

    if len(codes) < 2:
        return None
    big = int(np.argmax(levels))
    small = [j for j in range(len(codes)) if j != big]
    small_levels = tuple(int(levels[j]) for j in small)
    if sum(small_levels) > limit:
        return None
    big_codes, n_big = codes[big], int(levels[big])
    big_totals = _totals(big_codes, n_big, weights)
    offsets = np.concatenate([[0], np.cumsum(small_levels)])
    gram = _rest_gram([codes[j] for j in small], small_levels, weights)
    if n_big * offsets[-1] <= DENSE_CROSS:
        cross = np.hstack([np.bincount(big_codes * n + codes[j], weights=weights,
                                       minlength=n_big * n).reshape(n_big, n)
                           for j, n in zip(small, small_levels)]).astype(np.float64)
        subtracted = cross.T @ (cross / big_totals[:, None])
    else:
        rows = np.concatenate([big_codes] * len(small))
        cols = np.concatenate([codes[j] + offsets[k] for k, j in enumerate(small)])
        data = (np.ones(rows.size) if weights is None else np.concatenate([weights] * len(small)))
        cross = sparse.coo_matrix((data, (rows, cols)), shape=(n_big, offsets[-1])).tocsr()
        subtracted = (cross.T @ (sparse.diags(1.0 / big_totals) @ cross)).toarray()
    # The scale of the cutoff is the largest level weight sum (the largest diagonal entry of
    # D_R'WD_R, which bounds every eigenvalue): with a small fixed effect nested in the largest
    # the matrix is zero up to rounding, and every direction is then discarded.
    reference = float(np.max(np.diag(gram)))
    gram -= subtracted
    values, vectors = eigh(0.5 * (gram + gram.T))
    kept = values > EIGEN_CUTOFF * reference
    return DirectPlan(big_codes, big_totals, tuple(codes[j] for j in small), small_levels,
                      cross, np.ascontiguousarray(vectors[:, kept]), 1.0 / values[kept], big)


def direct_residual(plan: DirectPlan, column: np.ndarray,
                    weights: np.ndarray | None) -> tuple[np.ndarray, float]:
    """``column`` residualised on every fixed effect of ``plan`` by the direct solve, and the
    norm of the column demeaned by the largest fixed effect alone (the scale of the stopping
    rule)."""
    big_totals = plan.big_totals
    w_col = column if weights is None else column * weights
    means = np.bincount(plan.big_codes, weights=w_col, minlength=big_totals.size) / big_totals
    within = column - means[plan.big_codes]
    scale = float(np.sqrt(np.einsum("i,i->", within, within)))
    w_within = within if weights is None else within * weights
    rhs = np.concatenate([np.bincount(c, weights=w_within, minlength=n)
                          for c, n in zip(plan.small_codes, plan.small_levels)])
    beta = plan.basis @ ((plan.basis.T @ rhs) * plan.inverse_values)
    back = (plan.cross @ beta) / big_totals
    residual = within + back[plan.big_codes]
    start = 0
    for c, n in zip(plan.small_codes, plan.small_levels):
        residual -= beta[start:start + n][c]
        start += n
    return residual, scale
