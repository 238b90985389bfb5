"""A smaller basis for a Kronecker score block (``estimation/score_basis.py``).

Sources beside each check (common practice, no source): maps built inside a random span get
a basis whose products reproduce them over the rows; maps outside it (or a rank-deficient
spanning set) leave the block unchanged; a basis that saves no columns is not built.
"""

from __future__ import annotations

import numpy as np

from sensiv.estimation.moments import ScoreBlock
from sensiv.estimation.score_basis import in_basis


def setting(seed=0, n=400, p=9, m=4):
    rng = np.random.default_rng(seed)
    rows = np.column_stack([np.ones(n), rng.normal(size=(n, p)) * rng.uniform(0.1, 10, p)])
    gram = rows.T @ rows
    spanning = rng.normal(size=(p + 1, m))
    return rng, rows, gram, spanning


def test_maps_in_the_span_get_an_exact_basis():
    rng, rows, gram, spanning = setting()
    left = spanning @ rng.normal(size=(4, 5))
    right = spanning @ rng.normal(size=(4, 6))
    block = in_basis(ScoreBlock("b", left, right), spanning, gram)
    v, a, b = block.basis
    for maps, coef in ((left, a), (right, b)):
        np.testing.assert_allclose(rows @ v @ coef, rows @ maps, rtol=0,
                                   atol=1e-12 * np.abs(rows @ maps).max())
    np.testing.assert_allclose(v.T @ gram @ v, np.eye(4), atol=1e-12)   # orthonormal


def test_maps_outside_the_span_keep_the_plain_block():
    rng, rows, gram, spanning = setting(1)
    left = spanning @ rng.normal(size=(4, 5))
    right = spanning @ rng.normal(size=(4, 6))
    right[:, 2] += 1e-6 * rng.normal(size=right.shape[0])     # slightly outside
    block = ScoreBlock("b", left, right)
    assert in_basis(block, spanning, gram) is block
    degenerate = np.column_stack([spanning, spanning[:, :1]])   # rank 4 of 5 columns
    assert in_basis(ScoreBlock("b", left, spanning @ rng.normal(size=(4, 6))), degenerate,
                    gram).basis is None


def test_no_basis_when_it_saves_nothing():
    rng, rows, gram, spanning = setting(2)
    block = ScoreBlock("b", spanning[:, :2], spanning[:, 2:])      # 4 scores, 10 products
    assert in_basis(block, spanning, gram) is block
