"""Inference for the correlation-restriction bounds: a nonparametric bootstrap of the two
bounds at the chosen ratio and the Imbens & Manski (2004) interval from their standard errors.

Each replicate is the moments of the rows re-weighted by multinomial counts (whole clusters
when the spec names a cluster column), so no rows are copied, and its set is found by exact
one-variable elimination (:func:`sensiv.partial_id.correlation_moments.eliminate`) rather than
by the cvxpy programmes, which would dominate the run time.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from sensiv.core.errors import InputError
from sensiv.core.progress import Progress
from sensiv.core.results import Interval
from sensiv.estimation.inference import imbens_manski
from sensiv.estimation.moments import chunk_moments
from sensiv.partial_id.correlation_moments import (PartialCorrelations, eliminate,
                                                   partial_correlations)
from sensiv.partial_id.correlation_results import BootstrapSummary

# A bootstrap standard error needs at least this many usable replicates.
MIN_USABLE_REPS = 2


def replicate_moments(values: np.ndarray, weights: np.ndarray | None,
                      codes: np.ndarray | None, columns: Sequence[str], reps: int, seed: int):
    """Moments of each bootstrap replicate: multinomial counts as weights, no row copies."""
    rng = np.random.default_rng(seed)
    n = values.shape[0]
    base = np.ones(n) if weights is None else weights
    groups = None if codes is None else int(codes.max()) + 1
    for _ in range(reps):
        if codes is None:
            counts = np.bincount(rng.integers(0, n, size=n), minlength=n)
        else:
            counts = np.bincount(rng.integers(0, groups, size=groups), minlength=groups)[codes]
        yield chunk_moments(columns, values, counts * base)


def hull(pc: PartialCorrelations, signs: Sequence[int],
         ratio: float) -> tuple[float, float] | None:
    """Hull of the set at ``ratio`` over ``signs`` in units of ``β`` (``None`` when empty)."""
    pieces = [p for p in (eliminate(pc, s, ratio) for s in signs) if p is not None]
    if not pieces:
        return None
    return (min(p[0] for p in pieces) * pc.scale, max(p[1] for p in pieces) * pc.scale)


def bootstrap(rows, layout, signs: Sequence[int], ratio: float, estimate: Interval, reps: int,
              seed: int, confidence_level: float, progress: bool) -> BootstrapSummary:
    """Bootstrap standard errors of the two bounds at ``ratio`` and their interval.

    Parameters
    ----------
    rows : tuple
        ``(values, weights, codes)`` from :func:`resample_rows`.
    layout : sensiv.data.Layout
    signs : sequence of {1, -1}
        The admissible signs of ``corr(X, u)``.
    ratio : float
        The ratio bound ``r̄`` of the estimate.
    estimate : Interval
        Hull of the estimated set; an end finite here must be finite in a used replicate.
    reps, seed : int
    confidence_level : float
    progress : bool
        Show a progress line on a terminal's stderr.
    """
    values, weights, codes = rows
    lows, highs = np.full(reps, np.nan), np.full(reps, np.nan)
    n_empty = n_unbounded = n_degenerate = 0
    bar = Progress(total=reps, label="bootstrap", enabled=progress)
    replicates = replicate_moments(values, weights, codes, layout.columns, reps, seed)
    for j, moments in enumerate(replicates):
        pc = partial_correlations(moments, layout)
        found = None if pc is None else hull(pc, signs, ratio)
        if pc is None:
            n_degenerate += 1
        elif found is None:
            n_empty += 1
        elif ((math.isfinite(estimate.low) and not math.isfinite(found[0]))
              or (math.isfinite(estimate.high) and not math.isfinite(found[1]))):
            n_unbounded += 1
        else:
            lows[j], highs[j] = found
        bar.update(j + 1)
    bar.close()
    used = ~np.isnan(lows)
    n_used = int(used.sum())
    ci = None
    se_low = se_high = math.nan
    if n_used >= MIN_USABLE_REPS:
        se_low = float(np.std(lows[used], ddof=1)) if math.isfinite(estimate.low) else math.nan
        se_high = float(np.std(highs[used], ddof=1)) if math.isfinite(estimate.high) else math.nan
        ci = imbens_manski(estimate.low, estimate.high,
                           0.0 if math.isnan(se_low) else se_low,
                           0.0 if math.isnan(se_high) else se_high, confidence_level)
    groups = None if codes is None else int(codes.max()) + 1
    return BootstrapSummary(reps, seed, groups, n_used, n_empty, n_unbounded, n_degenerate,
                            se_low, se_high, ci)


def resample_rows(chunks, cluster: str | None):
    """Concatenate the clean chunks into ``(values, weights, codes)`` for resampling.

    ``weights`` is ``None`` without a weight column and ``codes`` ``None`` without
    ``cluster``.  Cluster codes follow the sorted cluster keys (not the order of first
    appearance), so the same seed draws the same clusters, and gives the same interval, whatever
    the order of the rows.
    """
    import pandas as pd

    values = np.concatenate([c.values for c in chunks])
    weights = None
    if chunks[0].weights is not None:
        weights = np.concatenate([c.weights for c in chunks])
    codes = None
    if cluster is not None:
        labels = np.concatenate([np.asarray(c.clusters, dtype=object) for c in chunks])
        try:
            codes, uniques = pd.factorize(labels, sort=True)
        except TypeError:  # keys of mixed types: order them by type name and text
            keyed = np.array([f"{type(v).__name__}:{v!r}" for v in labels], dtype=object)
            codes, uniques = pd.factorize(keyed, sort=True)
        if len(uniques) < 2:
            raise InputError(f"cluster variable '{cluster}' has only {len(uniques)} group in "
                             "the rows used; a cluster bootstrap needs many groups: drop "
                             "--cluster or choose another cluster variable")
    return values, weights, codes
