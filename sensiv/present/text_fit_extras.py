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


def tf_lines(fit) -> list[str]:
    """The tF critical value and interval (one treatment and one instrument only)."""
    tf = getattr(fit, "tf", None)
    if tf is None:
        return []
    head = (f"tF (Lee, McCrary, Moreira & Porter 2022) for {fit.treatments[0]} at first-stage "
            f"F = {format_number(tf.f, 4)}: ")
    if tf.critical_value is None:
        return [head + (tf.reason or "not available")]
    return [head + f"critical value {format_number(tf.critical_value, 4)} (1.96 from F = "
                   f"104.7), 95% tF interval {tf.ci}"]
