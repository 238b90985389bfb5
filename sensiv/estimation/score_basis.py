r"""A smaller basis for a Kronecker score block, checked against the data's moments.

:func:`in_basis` expresses a block's maps ``L`` and ``R`` in an orthonormal basis (in the
weighted metric of the rows, ``Σ wᵢ d̃ᵢ'd̃ᵢ``, i.e. the fit's ``gram``) of given spanning maps:
``V = S C'⁻¹`` with ``S'GS = CC'``, and ``A = V'GL``, ``B = V'GR`` (projections).  When every
column of ``L`` and ``R`` lies in the span over the rows, ``d̃V A = d̃L`` and ``d̃V B = d̃R``
hold exactly in exact arithmetic; the function checks that the projection residuals are at
rounding level (relative ``G``-norm ≤ :data:`TOLERANCE`) and returns the block unchanged
otherwise, so a wrong spanning set costs time, never accuracy.  An orthonormal basis keeps the
distinct products ``vⱼvₗ`` of one size, so folding them back (``F'UF``,
:mod:`sensiv.estimation.symmetric_rows`) adds no cancellation beyond the map's own.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from sensiv.estimation.moments import ScoreBlock
from sensiv.estimation.symmetric_rows import distinct_count

TOLERANCE = 1e-11
"""Largest relative ``G``-norm of a projection residual for the basis to be used."""


def in_basis(block: ScoreBlock, spanning: np.ndarray, gram: np.ndarray) -> ScoreBlock:
    """``block`` with :attr:`ScoreBlock.basis` when its maps lie in the span of ``spanning``
    (``(1+p, m)`` maps) over the rows and that saves columns, else ``block`` itself."""
    m = spanning.shape[1]
    if distinct_count(m) >= block.size:
        return block
    s = spanning.T @ gram @ spanning
    try:
        c = np.linalg.cholesky(0.5 * (s + s.T))
    except np.linalg.LinAlgError:
        return block
    v = np.linalg.solve(c, spanning.T).T
    coefficients = []
    for maps in (block.left, block.right):
        coef = v.T @ gram @ maps
        residual = maps - v @ coef
        size = np.einsum("ij,ik,kj->j", maps, gram, maps)
        misfit = np.einsum("ij,ik,kj->j", residual, gram, residual)
        if not np.all(np.isfinite(coef)) or np.any(misfit > TOLERANCE ** 2 * size):
            return block
        coefficients.append(coef)
    return replace(block, basis=(v, *coefficients))
