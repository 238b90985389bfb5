"""Pass 2 in slices of rows (``estimation/score_rows.row_slices``).

Source (common practice, no source): sums over disjoint rows add, so slicing a chunk changes
only the order of additions — the robust meats, one- and two-way cluster meats and the
per-cluster sums equal those of whole chunks to 1e-12 relative, weighted and unweighted.
"""

from __future__ import annotations

import numpy as np
import pytest

from sensiv.estimation import score_rows
from sensiv.estimation.moments import cluster_score_sums, score_sums

from test_symmetric_rows import chunks_of, random_case, relative


@pytest.mark.parametrize("weighted", [False, True])
def test_slices_give_the_sums_of_whole_chunks(monkeypatch, weighted):
    values, mean, block, weights, clusters = random_case(8, n=1500)
    weights = weights if weighted else None
    plain = type(block)("plain", block.left, block.right)     # per-row scores, no basis

    def everything():
        chunks = chunks_of(values, weights, clusters, size=700)
        one = chunks_of(values, weights, clusters[:, 0], size=700)
        return (score_sums(chunks_of(values, weights, None, size=700), mean, [block, plain],
                           cluster=False).meats,
                score_sums(one, mean, [block, plain], cluster=True).meats,
                score_sums(chunks, mean, [block, plain], cluster=True).meats,
                cluster_score_sums(one, mean, [block, plain])[1])

    whole = everything()
    monkeypatch.setattr(score_rows, "PASS2_ROWS", 64)
    sliced = everything()
    for a, b in zip(whole, sliced):
        for name in ("kron", "plain"):
            assert relative(b[name], a[name]) < 1e-12
