"""Tests for sensiv.estimation.parallel and the passes that use it: chunk kernels on several
threads give results in chunk order, and the moments and robust score sums do not depend on
the number of threads; the cache-blocked pass 2 equals the plain formula ``Σ gᵢgᵢ'`` with
``gᵢ = wᵢ vec(aᵢ ⊗ eᵢ)`` evaluated row by row on random data (common practice, no source).
"""

from __future__ import annotations

import threading
import time
from types import SimpleNamespace

import numpy as np
import pytest

import sensiv.estimation.parallel as parallel
from sensiv.estimation import moments, score_rows
from sensiv.estimation.moments import ScoreBlock, accumulate, chunk_moments, score_sums


def test_ordered_map_keeps_the_order_and_a_state_per_thread():
    seen = set()

    def work(state, item):
        seen.add(id(state))
        time.sleep(0.002 * (item % 3))          # finish out of order
        return item * item, threading.get_ident()

    got = list(parallel.ordered_map(work, iter(range(40)), dict, workers=2))
    assert [value for value, _ in got] == [i * i for i in range(40)]
    assert len(seen) == len({thread for _, thread in got}) <= 2


def test_ordered_map_raises_the_errors_of_items_and_kernels():
    def items():
        yield from range(5)
        raise ValueError("bad chunk")

    with pytest.raises(ValueError, match="bad chunk"):
        list(parallel.ordered_map(lambda s, i: i, items(), dict, workers=2))

    def failing(state, item):
        if item == 3:
            raise KeyError("kernel")
        return item

    with pytest.raises(KeyError):
        list(parallel.ordered_map(failing, iter(range(10)), dict, workers=2))


def random_chunks(seed: int, sizes, p: int = 6, weighted: bool = True):
    rng = np.random.default_rng(seed)
    chunks = []
    for n in sizes:
        values = np.asfortranarray(rng.standard_normal((n, p)) * np.linspace(1, 50, p)
                                   + np.linspace(-3, 1e3, p))
        weights = rng.random(n) + 0.2 if weighted else None
        chunks.append(SimpleNamespace(values=values, weights=weights, clusters=None,
                                      n_dropped=0, n_filtered=0))
    return chunks


def blocks_for(p: int, seed: int):
    rng = np.random.default_rng(seed)
    return [ScoreBlock("wide", rng.standard_normal((1 + p, p)), rng.standard_normal((1 + p, 1))),
            ScoreBlock("other", rng.standard_normal((1 + p, 3)),
                       rng.standard_normal((1 + p, 1))),
            ScoreBlock("pair", rng.standard_normal((1 + p, 2)), rng.standard_normal((1 + p, 2)))]


def plain_meats(chunks, mean, blocks):
    values = np.vstack([c.values for c in chunks])
    weights = np.concatenate([c.weights for c in chunks])
    augmented = np.column_stack([np.ones(len(values)), values - mean])
    found = {}
    for b in blocks:
        a, e = augmented @ b.left, augmented @ b.right
        g = weights[:, None] * (a[:, :, None] * e[:, None, :]).reshape(len(values), -1)
        found[b.name] = g.T @ g
    return found


@pytest.mark.parametrize("seed", [1, 2])
def test_cache_blocked_pass_two_equals_the_plain_formula(seed):
    sizes = [score_rows.CACHE_ROWS * 2 + 17, 5, score_rows.CACHE_ROWS, 3_001]
    chunks = random_chunks(seed, sizes)
    mean = accumulate(chunks, [f"c{j}" for j in range(6)]).mean
    blocks = blocks_for(6, seed)
    got = score_sums(chunks, mean, blocks, cluster=False).meats
    for name, expected in plain_meats(chunks, mean, blocks).items():
        scale = np.sqrt(np.outer(np.diag(expected), np.diag(expected)))
        assert np.max(np.abs(got[name] - expected) / scale) < 1e-12


@pytest.mark.parametrize("weighted", [True, False])
def test_passes_do_not_depend_on_the_number_of_threads(monkeypatch, weighted):
    chunks = random_chunks(3, [10_000, 7_000, 10_000, 1, 9_999], weighted=weighted)
    columns = [f"c{j}" for j in range(6)]
    blocks = blocks_for(6, 3)
    results = []
    for workers in (1, 2):
        monkeypatch.setattr(parallel, "WORKERS", workers)
        m = accumulate(iter(chunks), columns)
        results.append((m, score_sums(iter(chunks), m.mean, blocks, cluster=False).meats))
    (m1, s1), (m2, s2) = results
    np.testing.assert_array_equal(m1.mean, m2.mean)            # bit for bit
    np.testing.assert_array_equal(m1.comoment, m2.comoment)
    assert (m1.n, m1.weight_sum) == (m2.n, m2.weight_sum)
    for name in s1:
        np.testing.assert_array_equal(s1[name], s2[name])
    # and pass 1 is the Chan–Golub–LeVeque merge of the chunks in order.  The reference uses
    # scratch of the same shape as the pass's: on AVX-512 hardware OpenBLAS's last bits depend
    # on the leading dimension of the centred block (measured: 7,000 rows centred into their
    # own 7,000-row block or into the first 7,000 rows of a BLOCK_ROWS block differ by 1e-14).
    scratch = np.empty((moments.BLOCK_ROWS, len(columns)), order="F")
    serial = chunk_moments(columns, chunks[0].values, chunks[0].weights, scratch=scratch)
    for c in chunks[1:]:
        serial = serial + chunk_moments(columns, c.values, c.weights, scratch=scratch)
    np.testing.assert_array_equal(serial.comoment, m1.comoment)
