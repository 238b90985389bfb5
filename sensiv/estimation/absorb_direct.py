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
``M_b D_R β = D_R β − D_b (Cβ / t_b)``.  Even the demeaned column is not formed:
``D_R'W M_b x = D_R'Wx − C'm`` with ``m`` the level means of ``x`` on ``D_b``, so

    r = x − D_b (m − Cβ / t_b) − D_R β

costs one group sum per fixed effect and one look-up each — less than one sweep of alternating
projections instead of the several that their accelerated iteration takes.

The matrix is singular (one null direction per connected component of the levels, and any
further redundancy of the indicators); it is inverted on its eigenvectors whose eigenvalue
exceeds :data:`EIGEN_CUTOFF` times the largest level weight sum, which gives the unique projection when the
discarded directions are the exact null space.  Whether that held is not assumed: the caller
(:func:`sensiv.estimation.absorb.demean_columns`) starts its alternating projections from this
solution and stops only when a sweep changes it by less than the tolerance (common practice of
checking a direct solve by the iteration it replaces, no source).  With two fixed effects that
change is computed without the sweep (:func:`sweep_change`): a sweep ``M_2 M_1`` changes ``r``
by ``P_1 r + P_2 r − P_2 P_1 r = D_1 a + D_2 (c − X'a / t_2)``, with ``a``, ``c`` the level means
of ``r`` on each and ``X = D_1'WD_2``, whose squared length ``Σ n_1 a² + Σ n_2 u² + 2 a'Nu``
(``n`` the rows per level, ``N = D_1'D_2``) needs only the group sums of ``r`` — and the
direct residual's are zero on the largest fixed effect, so one group sum.
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

CANCELLATION = 1e-4
"""The norm of a column demeaned by the largest fixed effect is taken from level sums
(``Σx² − Σ_g t_g m_g²``) unless that leaves less than this share of ``Σx²`` (digits lost to
cancellation); the demeaned column is then formed to measure it."""


@dataclass(frozen=True, slots=True)
class SweepCheck:
    """What :func:`sweep_change` needs for two fixed effects: the smaller one's codes, level
    weight sums and rows per level, the unweighted cross-tabulation ``D_b'D_s`` beside the
    plan's weighted one, and whether the largest fixed effect is swept first."""

    codes: np.ndarray
    totals: np.ndarray
    counts: np.ndarray
    pairs: object  # D_b'D_s (rows), dense or CSR
    big_first: bool


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
    big_counts: np.ndarray  # rows per level of the largest (its totals when unweighted)
    check: SweepCheck | None  # two fixed effects: the sweep's change from level sums


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
    gram = _rest_gram([codes[j] for j in small], small_levels, weights)
    cross = _cross(big_codes, n_big, [codes[j] for j in small], small_levels, weights)
    if sparse.issparse(cross):
        subtracted = (cross.T @ (sparse.diags(1.0 / big_totals) @ cross)).toarray()
    else:
        subtracted = cross.T @ (cross / big_totals[:, None])
    # The scale of the cutoff is the largest level weight sum (the largest diagonal entry of
    # D_R'WD_R, which bounds every eigenvalue): with a small fixed effect nested in the largest
    # the matrix is zero up to rounding, and every direction is then discarded.
    reference = float(np.max(np.diag(gram)))
    gram -= subtracted
    values, vectors = eigh(0.5 * (gram + gram.T))
    kept = values > EIGEN_CUTOFF * reference
    big_counts = big_totals if weights is None else _totals(big_codes, n_big, None)
    check = None
    if len(codes) == 2:
        other = codes[small[0]]
        pairs = cross if weights is None else _cross(big_codes, n_big, [other], small_levels,
                                                     None)
        check = SweepCheck(other, _totals(other, small_levels[0], weights),
                           _totals(other, small_levels[0], None), pairs, big == 0)
    return DirectPlan(big_codes, big_totals, tuple(codes[j] for j in small), small_levels,
                      cross, np.ascontiguousarray(vectors[:, kept]), 1.0 / values[kept], big,
                      big_counts, check)


def _cross(big_codes: np.ndarray, n_big: int, codes: Sequence[np.ndarray],
           levels: Sequence[int], weights: np.ndarray | None):
    """``D_b'WD_R``: the (weighted) cross-tabulation of the largest fixed effect against the
    others side by side, dense while it is small (:data:`DENSE_CROSS`), else CSR."""
    from scipy import sparse

    if n_big * sum(levels) <= DENSE_CROSS:
        return np.hstack([np.bincount(big_codes * n + c, weights=weights,
                                      minlength=n_big * n).reshape(n_big, n)
                          for c, n in zip(codes, levels)]).astype(np.float64)
    offsets = np.concatenate([[0], np.cumsum(levels)])
    rows = np.concatenate([big_codes] * len(codes))
    cols = np.concatenate([c + offsets[k] for k, c in enumerate(codes)])
    data = np.ones(rows.size) if weights is None else np.concatenate([weights] * len(codes))
    return sparse.coo_matrix((data, (rows, cols)), shape=(n_big, offsets[-1])).tocsr()


def direct_residual(plan: DirectPlan, column: np.ndarray, weights: np.ndarray | None,
                    out: np.ndarray | None = None, scratch: np.ndarray | None = None
                    ) -> tuple[np.ndarray, float]:
    """``column`` residualised on every fixed effect of ``plan`` by the direct solve, and the
    norm of the column demeaned by the largest fixed effect alone (the scale of the stopping
    rule).  The residual is written to ``out`` and ``scratch`` is used for intermediate rows
    when given (row-sized buffers reused over columns: a fresh row-sized array per operation
    tripled the cost of a look-up and subtraction, measured on 1e6 rows)."""
    out = np.empty_like(column) if out is None else out
    scratch = np.empty_like(column) if scratch is None else scratch
    big_totals = plan.big_totals
    w_col = column if weights is None else np.multiply(column, weights, out=scratch)
    sums = np.bincount(plan.big_codes, weights=w_col, minlength=big_totals.size)
    means = sums / big_totals
    rhs = np.concatenate([np.bincount(c, weights=w_col, minlength=n)
                          for c, n in zip(plan.small_codes, plan.small_levels)])
    rhs -= plan.cross.T @ means
    beta = plan.basis @ ((plan.basis.T @ rhs) * plan.inverse_values)
    np.take(means - (plan.cross @ beta) / big_totals, plan.big_codes, out=out)
    np.subtract(column, out, out=out)
    start = 0
    for c, n in zip(plan.small_codes, plan.small_levels):
        out -= np.take(beta[start:start + n], c, out=scratch)
        start += n
    return out, _within_norm(plan, column, means, sums, weights, scratch)


def _within_norm(plan: DirectPlan, column: np.ndarray, means: np.ndarray, sums: np.ndarray,
                 weights: np.ndarray | None, scratch: np.ndarray) -> float:
    """``‖x − D_b m‖`` from level sums, or from the demeaned column where they cancel."""
    squares = float(np.einsum("i,i->", column, column))
    plain = sums if weights is None else np.bincount(plan.big_codes, weights=column,
                                                     minlength=means.size)
    left = squares - 2.0 * float(means @ plain) + float(plan.big_counts @ (means * means))
    if left <= CANCELLATION * squares:
        within = np.subtract(column, np.take(means, plan.big_codes, out=scratch), out=scratch)
        left = float(np.einsum("i,i->", within, within))
    return float(np.sqrt(max(left, 0.0)))


def sweep_change(plan: DirectPlan, residual: np.ndarray, weights: np.ndarray | None,
                 scratch: np.ndarray | None = None) -> float | None:
    """The length of the change one sweep of alternating projections would make to a
    ``residual`` of :func:`direct_residual` (see the module notes), or ``None`` unless there
    are two fixed effects.

    Such a residual has zero level sums on the largest fixed effect for any ``β``
    (``D_b'W r = S_b − t_b m + Cβ − Cβ``), so only the other fixed effect's level means ``c``
    are summed from the rows: swept first, the largest leaves ``r`` as it is and the change is
    ``D_s c``; swept second, the change is ``D_s c − D_b (Cc / t_b)``."""
    check = plan.check
    if check is None:
        return None
    w_res = residual if weights is None else np.multiply(residual, weights, out=scratch)
    means = np.bincount(check.codes, weights=w_res, minlength=check.totals.size) / check.totals
    square = float(check.counts @ (means * means))
    if not check.big_first:
        back = (plan.cross @ means) / plan.big_totals
        square += (float(plan.big_counts @ (back * back))
                   - 2.0 * float(back @ (check.pairs @ means)))
    return float(np.sqrt(max(square, 0.0)))
