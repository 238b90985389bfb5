"""Tests for sensiv.estimation.blas_threads: OpenBLAS runs on one thread inside a pass and
gets its previous thread count back afterwards, also when passes nest or run on several
threads at once (common practice, no source)."""

from __future__ import annotations

import threading

import numpy as np
import pytest
import scipy.linalg  # noqa: F401  (scipy's own OpenBLAS is then loaded too)

from sensiv.estimation.blas_threads import (blas_controls, gram, on_one_blas_thread,
                                           one_blas_thread)


def counts() -> list[int]:
    return [get() for get, _ in blas_controls()]


@pytest.fixture
def controls():
    found = blas_controls()
    if not found:
        pytest.skip("no OpenBLAS with a set_num_threads entry point is loaded here")
    before = counts()
    for _, put in found:
        put(2)
    yield found
    for (_, put), count in zip(found, before):
        put(count)


def test_one_thread_inside_and_the_old_count_after(controls):
    with one_blas_thread():
        assert counts() == [1] * len(controls)
        with one_blas_thread():                      # nested: still one, not restored early
            assert counts() == [1] * len(controls)
        assert counts() == [1] * len(controls)
    assert counts() == [2] * len(controls)


def test_concurrent_passes_restore_once_at_the_last_exit(controls):
    inside = threading.Barrier(3)
    leave = threading.Event()

    def a_pass():
        with one_blas_thread():
            inside.wait()
            leave.wait()

    threads = [threading.Thread(target=a_pass) for _ in range(2)]
    for thread in threads:
        thread.start()
    inside.wait()
    assert counts() == [1] * len(controls)
    leave.set()
    for thread in threads:
        thread.join()
    assert counts() == [2] * len(controls)


def test_the_decorator_keeps_arguments_results_and_errors(controls):
    @on_one_blas_thread
    def product(a, *, b):
        assert counts() == [1] * len(controls)
        if b is None:
            raise ValueError("no b")
        return a @ b

    a = np.arange(6.0).reshape(2, 3)
    np.testing.assert_array_equal(product(a, b=a.T), a @ a.T)
    with pytest.raises(ValueError, match="no b"):
        product(a, b=None)
    assert counts() == [2] * len(controls)


@pytest.mark.parametrize("order", ["C", "F"])
def test_gram_is_the_same_product(order):
    """``gram`` only moves ``a.T @ a`` to ``np.dot`` (which lets the GIL go): the same bits
    on a contiguous block, the same product to rounding on the row slices the passes take
    (common practice, no source)."""
    a = np.asarray(np.random.default_rng(2).normal(size=(5000, 13)), order=order)
    np.testing.assert_array_equal(gram(a), a.T @ a)
    part = a[17:4113]
    np.testing.assert_allclose(gram(part), part.T @ part, rtol=0, atol=1e-14 * 4096)
