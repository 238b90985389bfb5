"""The mode of a weighted normal-kernel density, for the mode-based estimate of
:mod:`sensiv.sensitivity.robust_estimators` (Hartwig, Davey Smith & Bowden 2017; the formulas
are in that module's docstring).  Pure numpy; rows are vectorised for the bootstrap.
"""

from __future__ import annotations

import math

import numpy as np

from sensiv.core.errors import InputError

DEFAULT_PHI = 1.0
"""Bandwidth parameter φ of the mode-based estimate (the paper's default)."""

GRID_POINTS = 512
"""Grid points over the ratio estimates at which the kernel density is first evaluated."""

MAD_SCALE = 1.4826
"""Scale that makes the median absolute deviation consistent for a normal SD."""


def check_bandwidth(phi, option: str = "--mode-bandwidth") -> float:
    """``phi`` as a float (``None``: :data:`DEFAULT_PHI`); refuse anything but a finite
    number > 0, naming ``option``."""
    if phi is None:
        return DEFAULT_PHI
    if isinstance(phi, bool) or not isinstance(phi, (int, float)) or not (
            math.isfinite(phi) and phi > 0):
        raise InputError(f"{option} {phi!r} is not a bandwidth parameter; give a finite number "
                         "> 0 (a multiple of the mode-based estimate's rule-of-thumb bandwidth), "
                         "e.g. 1 (the paper's default) or 0.5")
    return float(phi)


def mode_bandwidth(theta: np.ndarray, phi: float = DEFAULT_PHI) -> float:
    """The paper's bandwidth :math:`φ · 0.9 \\min(SD, 1.4826 MAD) J^{-1/5}` (at least 1e-8)."""
    return float(_bandwidths(theta[None, :], phi)[0])


def _bandwidths(rows: np.ndarray, phi: float) -> np.ndarray:
    sd = np.std(rows, axis=1, ddof=1)
    mad = MAD_SCALE * np.median(np.abs(rows - np.median(rows, axis=1, keepdims=True)), axis=1)
    return np.maximum(1e-8, phi * 0.9 * np.minimum(sd, mad) / rows.shape[1] ** 0.2)


def mode_rows(rows: np.ndarray, weights: np.ndarray, phi: float = DEFAULT_PHI,
              exact_start: bool = False) -> np.ndarray:
    """:func:`mode_value` of every row of ``rows`` (shape ``(R, J)``), vectorised over rows.

    Each row gets its own bandwidth (:func:`mode_bandwidth`).  The start of the climb is the
    highest point of the density on a grid — evaluated exactly on :data:`GRID_POINTS` points
    over the row's range plus at each ratio estimate (``exact_start``, used for the estimate
    itself), or for the bootstrap rows from linearly binned weights convolved with the kernel
    by FFT on a grid at most a quarter bandwidth apart — and :func:`_climb` refines it to the
    local maximum with the exact density.
    """
    w = weights / weights.sum()
    h = _bandwidths(rows, phi)
    starts = _exact_starts(rows, w, h) if exact_start else _binned_starts(rows, w, h)
    return _climb(rows, w, h, starts)


def _exact_starts(rows: np.ndarray, w: np.ndarray, h: np.ndarray) -> np.ndarray:
    out = np.empty(rows.shape[0])
    steps = np.linspace(0.0, 1.0, GRID_POINTS)
    for i, (row, hi) in enumerate(zip(rows, h)):
        grid = np.concatenate([row.min() + (row.max() - row.min()) * steps, row])
        z = (grid[:, None] - row[None, :]) / hi
        out[i] = grid[int(np.argmax((np.exp(-0.5 * z * z) * w).sum(axis=1)))]
    return out


def _binned_starts(rows: np.ndarray, w: np.ndarray, h: np.ndarray) -> np.ndarray:
    reps, count = rows.shape
    low = rows.min(axis=1) - 4 * h
    span = rows.max(axis=1) + 4 * h - low
    size = int(2 ** math.ceil(math.log2(max(1024.0, 4.0 * float(np.max(span / h))))))
    size = min(size, 1 << 18)
    out = np.empty(reps)
    chunk = max(1, (1 << 22) // size)
    for first in range(0, reps, chunk):
        part = slice(first, first + chunk)
        block, lo, sp, hb = rows[part], low[part], span[part], h[part]
        n = block.shape[0]
        delta = sp / (size - 1)
        pos = (block - lo[:, None]) / delta[:, None]
        left = np.clip(np.floor(pos).astype(np.int64), 0, size - 2)
        frac = pos - left
        offset = (np.arange(n) * size)[:, None]
        bins = np.bincount((offset + left).ravel(), (w * (1 - frac)).ravel(), n * size)
        bins += np.bincount((offset + left + 1).ravel(), (w * frac).ravel(), n * size)
        lags = np.concatenate([np.arange(size), np.arange(-size, 0)])
        kernel = np.exp(-0.5 * (lags[None, :] * (delta / hb)[:, None]) ** 2)
        density = np.fft.irfft(np.fft.rfft(bins.reshape(n, size), 2 * size)
                               * np.fft.rfft(kernel, 2 * size), 2 * size)[:, :size]
        out[part] = lo + delta * density.argmax(axis=1)
    return out


def _climb(rows: np.ndarray, w: np.ndarray, h: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Refine each start ``x`` to the local maximum of its row's density: a Newton step on the
    density where it is concave and the step stays within one bandwidth, a mean-shift step
    otherwise (both move uphill near a maximum; the mean-shift step always does)."""
    active = np.ones(rows.shape[0], dtype=bool)
    for _ in range(200):
        r, hh = rows[active], h[active, None]
        u = (r - x[active, None]) / hh
        k = w * np.exp(-0.5 * u * u)
        f0 = k.sum(axis=1)
        f1 = (k * u).sum(axis=1)                    # h · f'(x), up to a common factor
        f2 = (k * (u * u - 1.0)).sum(axis=1)        # h² · f''(x), same factor
        safe = np.where(f0 > 0, f0, 1.0)
        shift = hh[:, 0] * f1 / safe                # the mean-shift step
        newton = np.where(f2 < 0, -hh[:, 0] * f1 / np.where(f2 < 0, f2, -1.0), np.inf)
        step = np.where(np.abs(newton) <= hh[:, 0], newton, shift)
        step = np.where(f0 > 0, step, 0.0)
        x[active] = x[active] + step
        done = np.abs(step) <= 1e-13 * np.maximum(1.0, np.abs(x[active])) + 1e-12 * hh[:, 0]
        active[np.flatnonzero(active)[done]] = False
        if not active.any():
            break
    return x


def mode_value(theta: np.ndarray, weights: np.ndarray, phi: float = DEFAULT_PHI) -> float:
    """The mode of the weighted normal-kernel density of ``theta`` (module docstring).

    Examples
    --------
    >>> round(mode_value(np.array([0.0, 1.0, 1.0, 1.0, 5.0]), np.ones(5)), 3)
    1.0
    """
    return float(mode_rows(theta[None, :], weights, phi, exact_start=True)[0])
