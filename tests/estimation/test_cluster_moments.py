"""Per-cluster moment matrices against the plain computations they replace.

Checks (exact algebra, common practice, no source): the gathered ``M_g = Σ w d̃ d̃'`` equal a
per-cluster loop over the rows; matrices gathered in two parts with different shifts merge
to the matrices of the whole; the cluster score sums mapped from them equal the numpy
kernel's per-row score sums (``moments.cluster_score_sums``) to 1e-11 relative, weighted and
unweighted; past the size limit the gatherer gives up instead of growing."""

from __future__ import annotations

import numpy as np
import pytest

from sensiv.data.source import Chunk
from sensiv.estimation import cluster_moments
from sensiv.estimation.cluster_moments import Gatherer, merged, scores_from, small_codes
from sensiv.estimation.moments import ScoreBlock, cluster_score_sums


def design(seed: int, n: int = 3000, p: int = 6, groups: int = 37):
    rng = np.random.default_rng(seed)
    values = rng.normal(size=(n, p)) + np.arange(p) * 50.0      # large means
    weights = rng.uniform(0.3, 3.0, n)
    labels = np.array([f"c{k}" for k in rng.integers(0, groups, n)], dtype=object)
    return values, weights, labels


def brute(values, weights, labels, shift):
    out = {}
    for label in dict.fromkeys(labels.tolist()):
        rows = labels == label
        x = np.column_stack([np.ones(rows.sum()), values[rows] - shift])
        out[label] = (x * weights[rows, None]).T @ x
    return out


@pytest.mark.parametrize("weighted", [True, False])
def test_gathered_matrices_equal_a_loop_over_clusters(weighted):
    values, weights, labels = design(1)
    w = weights if weighted else None
    gatherer = Gatherer(values.shape[1])
    for rows in np.array_split(np.arange(len(values)), 4):
        gatherer.add(values[rows], None if w is None else w[rows], labels[rows])
    got = gatherer.result()
    want = brute(values, weights if weighted else np.ones(len(values)), labels, got.shift)
    assert got.labels == list(want)
    for label, matrix in zip(got.labels, got.matrices):
        np.testing.assert_allclose(matrix, want[label], rtol=1e-12, atol=1e-9)


def test_parts_with_different_shifts_merge_to_the_whole():
    values, weights, labels = design(2)
    half = len(values) // 2
    parts = []
    for rows in (slice(0, half), slice(half, None)):
        g = Gatherer(values.shape[1])
        g.add(values[rows] + 0.0, weights[rows], labels[rows])
        parts.append(g.result())
    assert not np.allclose(parts[0].shift, parts[1].shift)
    got = merged(*parts)
    want = brute(values, weights, labels, got.shift)
    for label, matrix in zip(got.labels, got.matrices):
        np.testing.assert_allclose(matrix, want[label], rtol=1e-11, atol=1e-8)


@pytest.mark.parametrize("weighted", [True, False])
def test_mapped_score_sums_equal_the_row_kernel(weighted):
    values, weights, labels = design(3)
    w = weights if weighted else None
    rng = np.random.default_rng(4)
    p = values.shape[1]
    blocks = [ScoreBlock("a", rng.normal(size=(1 + p, 3)), rng.normal(size=(1 + p, 2))),
              ScoreBlock("b", rng.normal(size=(1 + p, 1)), rng.normal(size=(1 + p, 4)))]
    mean = np.average(values, axis=0, weights=w)
    chunk = Chunk(np.asfortranarray(values), w, labels, 0)
    want_labels, want = cluster_score_sums([chunk], mean, blocks)
    gatherer = Gatherer(p)
    gatherer.add(values, w, labels)
    gathered = gatherer.result()
    got = scores_from(gathered, mean, blocks)
    assert gathered.labels == want_labels
    for block in blocks:
        scale = np.abs(want[block.name]).max()
        np.testing.assert_allclose(got[block.name], want[block.name], rtol=1e-11,
                                   atol=1e-11 * scale)


def test_too_many_clusters_gives_up(monkeypatch):
    monkeypatch.setattr(cluster_moments, "MAX_ENTRIES", 100)
    values, weights, labels = design(5, groups=40)
    gatherer = Gatherer(values.shape[1])
    gatherer.add(values, weights, labels)
    assert gatherer.full and gatherer.result() is None


def test_small_codes_sort_in_the_same_order():
    """The 16-bit codes of the per-cluster sort give the same stable order as the codes
    themselves, and codes too large for 16 bits are left as they are (common practice, no
    source)."""
    codes = np.random.default_rng(5).integers(0, 700, 20_000)
    np.testing.assert_array_equal(np.argsort(small_codes(codes), kind="stable"),
                                  np.argsort(codes, kind="stable"))
    large = np.array([0, 70_000, 3])
    assert small_codes(large) is large
