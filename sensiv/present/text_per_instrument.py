"""Words for the per-instrument sensitivity analyses of a table of associations: direct effects
bounded per instrument, a normal prior on them, the invalid-count breakdown (formatting only).

Each analysis has ``*_lines`` (plain text, one list entry per line, without the assumptions and
caution, which the command's report gathers once) and ``*_cells`` (Markdown rows ``[quantity,
value]``).
"""

from __future__ import annotations

from sensiv.core.results import format_number
from sensiv.sensitivity.invalid_count import InvalidCount
from sensiv.sensitivity.per_instrument import DirectEffects
from sensiv.sensitivity.per_instrument_prior import PriorEffects
from sensiv.sensitivity.per_instrument_sets import UNIT_WORDS

NEVER = "none up to 1000 times the set"


def _pct(level: float) -> str:
    return f"{100 * level:g}%"


def _scale_words(scale: float | None, allowance: float | None, unit: str) -> str:
    """``"1.455 × the set (|α_j| ≤ 1.455 reduced-form SEs)"``, ``none ...`` or ``0 ...``."""
    if scale is None:
        return NEVER
    if scale == 0.0:
        return "0 (no conclusion to break at zero direct effect)"
    words = f"{format_number(scale)} × the set"
    if allowance is not None:
        words += f" (|α_j| up to {format_number(allowance)} in {UNIT_WORDS[unit]})"
    return words


def direct_effects_lines(res: DirectEffects) -> list[str]:
    """The direct-effect analysis of a table in plain text."""
    pct, b = _pct(res.confidence_level), res.breakdown
    ba = res.bias_aware
    return [
        f"Direct effects bounded per instrument: {res.allowance.text} "
        f"({UNIT_WORDS[res.allowance.unit]}), {len(res.instruments)} instruments",
        f"  IVW estimate ({res.core.order}-order weights held fixed, {res.core.se_rule}-effect "
        f"se): {format_number(res.core.estimate)} (se {format_number(res.core.se)})",
        f"  Identified set (no sampling error):    {res.identified_set}",
        f"  Union of {pct} intervals over the set: {res.union_ci}",
        f"  Bias-aware {pct} interval:             {ba.ci}  (IVW at the {ba.centre}: "
        f"{format_number(ba.estimate)}, worst-case bias {format_number(ba.max_bias)}, se "
        f"{format_number(ba.se)}, critical value {format_number(ba.critical_value)}; "
        "Armstrong & Kolesar 2021)",
        f"  Conclusion examined: {b.conclusion}",
        f"  Breakdown (union): {_scale_words(b.scale, b.allowance, b.unit)}",
        f"  Breakdown (bias-aware): "
        f"{_scale_words(b.bias_aware_scale, b.bias_aware_allowance, b.unit)}",
    ]


def direct_effects_cells(res: DirectEffects) -> list[list[str]]:
    """Markdown rows of the direct-effect analysis."""
    pct, b, ba = _pct(res.confidence_level), res.breakdown, res.bias_aware
    return [["assumed direct effects", f"{res.allowance.text} ({UNIT_WORDS[res.allowance.unit]})"],
            ["identified set", str(res.identified_set)],
            [f"union of {pct} intervals", str(res.union_ci)],
            [f"bias-aware {pct} interval (IVW at the {ba.centre})", str(ba.ci)],
            ["bias-aware: estimate / worst-case bias / se / critical value",
             " / ".join(format_number(v) for v in (ba.estimate, ba.max_bias, ba.se,
                                                       ba.critical_value))],
            ["conclusion examined", b.conclusion],
            ["breakdown (union)", _scale_words(b.scale, b.allowance, b.unit)],
            ["breakdown (bias-aware)",
             _scale_words(b.bias_aware_scale, b.bias_aware_allowance, b.unit)]]


def _region_words(region: int, threshold: float) -> str:
    theta = format_number(threshold)
    return {1: "the conclusion is kept", 0: f"the interval contains {theta}",
            -1: "the conclusion is reversed"}[region]


def prior_effects_lines(res: PriorEffects) -> list[str]:
    """The prior analysis of a table in plain text."""
    pct = _pct(res.confidence_level)
    return [f"Prior on the direct effects: each α_j ~ N({format_number(res.prior.mean)}, "
            f"{format_number(res.prior.sd)}²) in {UNIT_WORDS[res.prior.unit]}, independently",
            f"  {pct} prior interval (closed form): {res.interval}  (centre "
            f"{format_number(res.center)}, sd {format_number(res.sd)}; the estimate moves by "
            f"{format_number(-res.shift)} × μ and its variance grows by τ² × "
            f"{format_number(res.spread ** 2)})",
            f"  Conclusion examined: {res.conclusion}; under this prior "
            f"{_region_words(res.region, res.threshold)}"]


def prior_effects_cells(res: PriorEffects) -> list[list[str]]:
    """Markdown rows of the prior analysis."""
    pct = _pct(res.confidence_level)
    return [["prior on each direct effect", f"{res.prior.text()} ({UNIT_WORDS[res.prior.unit]})"],
            [f"{pct} prior interval (closed form)", str(res.interval)],
            ["under the prior", _region_words(res.region, res.threshold)]]


def invalid_count_sentence(res: InvalidCount) -> str:
    """The invalid-count breakdown in one sentence."""
    if res.count is None:
        return ("Invalid-count breakdown: none — the IVW interval of all instruments already "
                f"contains {format_number(res.threshold)}.")
    share = f"{100 * res.share:.3g}%"
    text = (f"Invalid-count breakdown: the conclusion ({res.conclusion}) holds whichever "
            f"{res.count} of the {res.instruments} instruments ({share}) are invalid and "
            "dropped")
    if res.exact:
        if res.worst:
            text += f"; dropping {len(res.worst)} ({', '.join(res.worst[:8])}"
            text += ", …)" if len(res.worst) > 8 else ")"
            text += " breaks it"
        return text + " (exact)."
    return (text + f" (certified; the exact count is at most {res.upper}, gap {res.gap}: the "
            "search stopped at its limit).")


def invalid_count_lines(res: InvalidCount) -> list[str]:
    """The invalid-count breakdown in plain text."""
    return [invalid_count_sentence(res),
            f"  IVW with {res.order}-order weights and fixed-effect se of the kept instruments; "
            f"method: {res.method}" if res.count is not None else
            f"  IVW with {res.order}-order weights and fixed-effect se"]


def invalid_count_cells(res: InvalidCount) -> list[list[str]]:
    """Markdown rows of the invalid-count breakdown."""
    if res.count is None:
        return [["invalid-count breakdown", "none (no conclusion at all instruments)"]]
    value = f"{res.count} of {res.instruments} ({100 * res.share:.3g}%)"
    value += "" if res.exact else f", certified (at most {res.upper})"
    return [["invalid-count breakdown", value]]
