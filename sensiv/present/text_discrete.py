"""Plain-text summary of the discrete bounds
(:class:`sensiv.partial_id.discrete_results.DiscreteBounds`): formatting only, every number
comes from the result.
"""

from __future__ import annotations

from sensiv.core import labels
from sensiv.core.results import format_number
from sensiv.partial_id.discrete_data import plain_number
from sensiv.partial_id.discrete_results import CAUTION, DiscreteBounds


def discrete_summary(result: DiscreteBounds) -> str:
    """Readable plain-text report of a :class:`DiscreteBounds` result."""
    t = result.table
    pct = f"{100 * result.confidence_level:g}%"
    levels = " / ".join(
        f"{name} {{{', '.join(str(plain_number(v)) for v in values)}}}"
        for name, values in ((t.instrument, t.instrument_levels),
                             (t.treatment, t.treatment_levels),
                             (t.outcome, t.outcome_levels)))
    lines = [
        f"Discrete bounds: {labels.effect_words(t.treatment, t.outcome)}, instrument "
        f"{labels.name(t.instrument)}",
        f"Data: {t.description}, n = {t.n} ({t.n_dropped} rows dropped for missing values); "
        f"levels {levels}",
        f"Estimand: {result.estimand()}",
        f"Budget for direct effects of {labels.name(t.instrument)}: {result.budget:g}"
        + (f"; monotone, defier budget {result.defier_budget:g}" if result.monotone else ""),
        "",
    ]
    header = f"{'contrast':<12}{'bounds':>26}{pct + ' CI':>26}{'breakdown budget':>20}"
    lines.append(header)
    for c in result.contrasts:
        bounds = str(c.bounds) if c.bounds is not None else "empty (no fit)"
        ci = str(c.ci) if c.ci is not None else "n/a"
        breakdown = format_number(c.breakdown_budget) if c.breakdown_budget is not None \
            else "never"
        name = f"{plain_number(c.level)} vs {plain_number(c.base)}"
        lines.append(f"{name:<12}{bounds:>26}{ci:>26}"
                     f"{breakdown:>20}")
    ineq = result.inequality
    lines += [
        "",
        f"Breakdown: smallest budget whose bounds contain {result.threshold:g}.",
        f"Instrumental inequality (Pearl 1995): {ineq.value:.4g} "
        f"{'<=' if ineq.holds else '>'} 1, {'holds' if ineq.holds else 'FAILS'}.",
        "Smallest budget that fits the data: "
        + (format_number(result.min_budget) if result.min_budget is not None else "none"),
    ]
    if result.min_defier_budget is not None:
        lines.append(f"Smallest defier share that fits the data: "
                     f"{format_number(result.min_defier_budget)}")
    if result.bootstrap is not None:
        b = result.bootstrap
        lines.append(f"Bootstrap: {b.reps} replicates (seed {b.seed}), {b.used} used, "
                     f"{b.infeasible} without a fit, {b.skipped} skipped.")
    lines += ["", "Curve (focus contrast):", f"{'budget':>10}{'lower':>12}{'upper':>12}"]
    step = max(1, (len(result.curve) - 1) // 10)
    shown = list(result.curve[::step])
    if shown[-1] is not result.curve[-1]:
        shown.append(result.curve[-1])
    for point in shown:
        low, high = ((format_number(point.bounds.low), format_number(point.bounds.high))
                     if point.bounds is not None else ("no fit", "no fit"))
        lines.append(f"{format_number(point.budget):>10}{low:>12}{high:>12}")
    lines += [f"Note: {note}" for note in result.notes]
    lines += ["", "Assumptions:"] + [f"- {a}" for a in result.assumptions()]
    lines += ["", CAUTION]
    return "\n".join(lines)
