"""Cluster sums in one or two ways as the engines that group rows themselves (``duckdb``,
``dask``) return them: per way the per-cluster score sums ``s_g``, combined as the numpy kernel
(:func:`sensiv.estimation.moments.score_sums`) does — ``Σ_g s_g s_g'`` per way and, for two-way
clustering (Cameron, Gelbach & Miller 2011), ``M_A + M_B − M_{A∩B}`` with the three one-way
meats kept for :func:`sensiv.estimation.covariance.combine_two_way` (each term's small-sample
factor and the eigenvalue fix)."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from sensiv.estimation.moments import ScoreSums


def combine_ways(per_way: Sequence[dict[str, np.ndarray]]) -> ScoreSums:
    """ScoreSums from per-cluster sums: one dict (block name → ``(G, size)`` array) per way,
    the ways in the order ``A`` (one-way), or ``A``, ``B``, ``A∩B``."""
    outer = [{name: s.T @ s for name, s in sums.items()} for sums in per_way]
    counts = tuple(len(next(iter(sums.values()))) if sums else 0 for sums in per_way)
    if len(outer) == 1:
        return ScoreSums(outer[0], counts[0])
    combined = {name: outer[0][name] + outer[1][name] - outer[2][name] for name in outer[0]}
    return ScoreSums(combined, min(counts[:2]), counts, tuple(zip((1, 1, -1), outer, counts)))


def pair_labels(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """The labels of the intersection clusters ``A∩B``: one ``(a, b)`` tuple per row."""
    out = np.empty(len(a), dtype=object)
    out[:] = list(zip(a.tolist(), b.tolist()))
    return out
