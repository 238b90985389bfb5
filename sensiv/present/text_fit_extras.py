"""Plain-text lines of a fit's optional parts: the wild cluster bootstrap."""

from __future__ import annotations

from sensiv.core.results import format_number


def bootstrap_lines(fit) -> list[str]:
    """The bootstrap's p-value and inverted interval (none without ``--bootstrap``)."""
    boot = getattr(fit, "bootstrap", None)
    if boot is None:
        return []
    pct = f"{100 * boot.confidence_level:g}%"
    return ["", f"Wild cluster bootstrap ({boot.method}; {boot.reps} replicates, "
                f"{boot.weights} weights, {boot.n_clusters} clusters, seed {boot.seed}):",
            f"  {boot.treatment} = {format_number(boot.threshold)}: bootstrap p = "
            f"{format_number(boot.p_value, 3)}",
            f"  {pct} interval by test inversion (same draws for every null): {boot.ci}"]
