r"""Kronecker score blocks through the distinct products of a small basis.

A block whose scores are :math:`g_i = w_i\,(a_i ⊗ b_i)` with :math:`a_i = v_i A` and
:math:`b_i = v_i B` for one row vector :math:`v_i = \tilde d_i V` of ``m`` columns
(:attr:`sensiv.estimation.moments.ScoreBlock.basis`) has, by the mixed-product rule,
:math:`a_i ⊗ b_i = (v_i ⊗ v_i)(A ⊗ B)`.  The ``m²`` products :math:`v_{ij} v_{il}` hold only
``m(m+1)/2`` distinct numbers (:math:`v_{ij} v_{il} = v_{il} v_{ij}` exactly, also in floating
point), so with the *distinct-product row* :math:`u_i = w_i\,\mathrm{vech}(v_i v_i')`

.. math::

    g_i = u_i F, \qquad \sum_i g_i g_i' = F'\Big(\sum_i u_i' u_i\Big) F, \qquad
    s_g = \Big(\sum_{i∈g} u_i\Big) F,

where ``F`` folds the rows of ``A ⊗ B`` that belong to the same distinct product
(:func:`fold`).  Per row that is ``m(m+1)/2`` columns instead of ``k_a k_e``: for the
optimally weighted interval's block (``a = Z̃``, ``b = [û, M]``, both in the span of
``[Z̃, X̃, û]``) with 20 instruments and one treatment, 253 columns instead of 420, i.e.
``253²/420² = 0.36`` of the multiply–adds of the sum of outer products, and the per-cluster
sums are 253 wide instead of 420.
"""

from __future__ import annotations

import numpy as np


def distinct_count(m: int) -> int:
    """Distinct products ``v_j v_l`` (``j ≤ l``) of ``m`` numbers."""
    return m * (m + 1) // 2


def fold(left: np.ndarray, right: np.ndarray) -> np.ndarray:
    """``F`` (``m(m+1)/2 × k_a k_e``): the rows of ``left ⊗ right`` summed per distinct product.

    Row ``j·m + l`` of ``left ⊗ right`` multiplies ``v_j v_l``; the distinct products are
    ordered ``(0,0), (0,1), …, (0,m−1), (1,1), …`` as :func:`products` writes them."""
    m = left.shape[0]
    kron = np.kron(left, right)
    rows = []
    for j in range(m):
        for el in range(j, m):
            row = kron[j * m + el]
            rows.append(row if el == j else row + kron[el * m + j])
    return np.array(rows)


def products(v: np.ndarray, weights: np.ndarray | None, scaled: np.ndarray,
             out: np.ndarray) -> np.ndarray:
    """``out[i] = wᵢ · vech(vᵢ vᵢ')`` in :func:`fold`'s order (``scaled``: scratch like ``v``)."""
    m = v.shape[1]
    if weights is not None:
        np.multiply(v, weights[:, None], out=scaled)
    else:
        scaled = v
    start = 0
    for j in range(m):
        np.multiply(scaled[:, j:j + 1], v[:, j:], out=out[:, start:start + m - j])
        start += m - j
    return out
