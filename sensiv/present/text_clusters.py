"""How a fit's clusters are named in text, tables and reports: one-way or two-way."""

from __future__ import annotations


def cluster_count_text(fit) -> str:
    """``"40"`` for one-way clusters, ``"40 (a) × 35 (b), two-way"`` for two-way ones."""
    counts = getattr(fit, "cluster_counts", ())
    if not counts:
        return f"{fit.n_clusters}"
    (a, b), (g_a, g_b) = fit.cluster, counts[:2]
    return f"{g_a} ({a}) × {g_b} ({b}), two-way"
