"""Kronecker score blocks through distinct products (``estimation/symmetric_rows.py``).

Sources beside each check:
* mixed-product rule ``(vA) ⊗ (vB) = (v ⊗ v)(A ⊗ B)`` and ``vⱼvₗ = vₗvⱼ``, common practice,
  no source: the folded meat / per-cluster sums equal the plain syrk of the ``a ⊗ b`` score
  rows, formed here directly by numpy on random data (to 1e-12 relative), weighted and
  unweighted, robust, one-way and two-way clustered.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pytest

from sensiv.estimation.moments import ScoreBlock, cluster_score_sums, score_sums
from sensiv.estimation.score_rows import ScoreRows
from sensiv.estimation.symmetric_rows import distinct_count, fold, products


@dataclass
class Chunk:
    values: np.ndarray
    weights: np.ndarray | None
    clusters: np.ndarray | None
    n_dropped: int = 0


def random_case(seed: int, n: int = 700, p: int = 7, m: int = 4, k_a: int = 4, k_b: int = 5):
    rng = np.random.default_rng(seed)
    values = np.asfortranarray(rng.normal(size=(n, p)) * rng.uniform(0.5, 3.0, p) + 2.0)
    mean = values.mean(axis=0) + rng.normal(size=p) * 0.1
    v = rng.normal(size=(p + 1, m))
    a, b = rng.normal(size=(m, k_a)), rng.normal(size=(m, k_b))
    block = ScoreBlock("kron", v @ a, v @ b, basis=(v, a, b))
    weights = rng.uniform(0.2, 3.0, n)
    clusters = np.column_stack([rng.integers(0, 40, n), rng.integers(0, 9, n)])
    return values, mean, block, weights, clusters


def plain_scores(values, mean, block, weights):
    rows = np.column_stack([np.ones(len(values)), values - mean])
    a, e = rows @ block.left, rows @ block.right
    g = (a[:, :, None] * e[:, None, :]).reshape(len(values), -1)
    return g if weights is None else g * weights[:, None]


def chunks_of(values, weights, clusters, size=123):
    return [Chunk(np.asfortranarray(values[i:i + size]),
                  None if weights is None else weights[i:i + size],
                  None if clusters is None else clusters[i:i + size])
            for i in range(0, len(values), size)]


def relative(found, expected):
    return np.max(np.abs(found - expected)) / np.max(np.abs(expected))


def test_fold_turns_distinct_products_into_kronecker_rows():
    rng = np.random.default_rng(3)
    v = rng.normal(size=(50, 5))
    a, b = rng.normal(size=(5, 3)), rng.normal(size=(5, 4))
    u = products(v, None, np.empty_like(v), np.empty((50, distinct_count(5))))
    expected = ((v @ a)[:, :, None] * (v @ b)[:, None, :]).reshape(50, -1)
    assert relative(u @ fold(a, b), expected) < 1e-12


@pytest.mark.parametrize("weighted", [False, True])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_robust_meat_equals_plain_syrk(weighted, seed):
    values, mean, block, weights, _ = random_case(seed)
    weights = weights if weighted else None
    g = plain_scores(values, mean, block, weights)
    found = score_sums(chunks_of(values, weights, None), mean, [block], cluster=False)
    assert relative(found.meats["kron"], g.T @ g) < 1e-12


@pytest.mark.parametrize("weighted", [False, True])
def test_cluster_meats_and_sums_equal_plain(weighted):
    values, mean, block, weights, clusters = random_case(4)
    weights = weights if weighted else None
    g = plain_scores(values, mean, block, weights)

    def grouped(codes):
        out = np.zeros((codes.max() + 1, g.shape[1]))
        np.add.at(out, codes, g)
        return out[np.unique(codes)]

    one = score_sums(chunks_of(values, weights, clusters[:, 0]), mean, [block], cluster=True)
    s = grouped(clusters[:, 0])
    assert relative(one.meats["kron"], s.T @ s) < 1e-12
    labels, sums = cluster_score_sums(chunks_of(values, weights, clusters[:, 0]), mean, [block])
    order = np.argsort(labels)
    assert relative(sums["kron"][order], s) < 1e-12
    two = score_sums(chunks_of(values, weights, clusters), mean, [block], cluster=True)
    pair = grouped(clusters[:, 0] * 100 + clusters[:, 1])
    b_way = grouped(clusters[:, 1])
    expected = s.T @ s + b_way.T @ b_way - pair.T @ pair
    assert relative(two.meats["kron"], expected) < 1e-12


def test_basis_is_used_only_when_it_saves_columns_and_shared():
    values, mean, block, weights, _ = random_case(5, m=4, k_a=2, k_b=2)
    rows = ScoreRows([block], mean)
    assert rows.widths == [block.size]          # 10 distinct products > 4 scores: plain
    values, mean, block, weights, _ = random_case(6)
    other = ScoreBlock("other", block.left[:, :3], block.right, basis=(block.basis[0],
                                                                      block.basis[1][:, :3],
                                                                      block.basis[2]))
    rows = ScoreRows([block, other], mean)
    assert rows.widths == [distinct_count(4)]   # one unit of distinct products for both
    g = plain_scores(values, mean, other, weights)
    found = score_sums(chunks_of(values, weights, None), mean, [block, other], cluster=False)
    assert relative(found.meats["other"], g.T @ g) < 1e-12
