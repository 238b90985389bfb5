"""Plain-text lines of a fit's optional parts: the wild cluster bootstrap."""

from __future__ import annotations

from sensiv.core.results import format_number


def bootstrap_lines(fit) -> list[str]:
    """The bootstrap's p-value and inverted interval (none without ``--bootstrap``)."""
    boot = getattr(fit, "bootstrap", None)
    if boot is None:
        return []
    pct = f"{100 * boot.confidence_level:g}%"
    return ["", f"Bootstrap: {boot.method}; {boot.reps} replicates, {boot.weights} weights, "
                f"{boot.n_clusters} clusters, seed {boot.seed}",
            f"  {boot.treatment} = {format_number(boot.threshold)}: bootstrap "
            f"{p_value_text(boot.p_value, boot.reps)}",
            f"  {pct} interval by test inversion (same draws for every null): {boot.ci}"]


def p_value_text(p: float, reps: int) -> str:
    """A bootstrap p-value; zero is stated as below the resolution of ``reps`` replicates.

    >>> p_value_text(0.0, 999), p_value_text(0.0421, 999)
    ('p < 0.001 (no replicate as extreme)', 'p = 0.0421')
    """
    if p == 0.0:
        return f"p < {format_number(1.0 / reps, 1)} (no replicate as extreme)"
    return f"p = {format_number(p, 3)}"


def tf_lines(fit) -> list[str]:
    """The tF critical value and interval (one treatment and one instrument only)."""
    tf = getattr(fit, "tf", None)
    if tf is None:
        return []
    head = (f"tF (Lee, McCrary, Moreira & Porter 2022) for {fit.treatments[0]} at first-stage "
            f"F = {format_number(tf.f, 4)}: ")
    if tf.critical_value is None:
        return [head + (tf.reason or "not available")]
    table = tf.table
    end = (f"{format_number(table.z, 4)} from F = {format_number(table.upper_f, 4)}"
           if table.reaches_z else f"{format_number(table.last, 4)} from F = "
           f"{format_number(table.upper_f, 4)}, where the table ends")
    return [head + f"critical value {format_number(tf.critical_value, 4)} ({end}), "
                   f"{100 * tf.level:g}% tF interval {tf.ci}"]
