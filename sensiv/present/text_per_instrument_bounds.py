"""Plain-text lines of the per-instrument sensitivity parts: direct-effect bounds, prior
interval and invalid-count breakdown (formatting only)."""

from __future__ import annotations

from sensiv.core.results import format_number
from sensiv.sensitivity.per_instrument_sets import UNIT_WORDS


def _scale(value, what: str) -> str:
    if value is None:
        return f"the {what} keeps the conclusion at every scale examined"
    if value == 0:
        return f"the {what} has no conclusion to break at zero direct effect"
    return f"breaks at {format_number(value)} times the stated range"


def direct_lines(direct) -> list[str]:
    """The identified set, union and bias-aware interval over Γ, and the breakdown scales."""
    if direct is None:
        return []
    pct = f"{100 * direct.confidence_level:g}%"
    a, b = direct.allowance, direct.breakdown
    unit = UNIT_WORDS[a.unit]
    lines = [f"Direct effects bounded per instrument: {a.text} ({unit})",
             f"  identified set {direct.identified_set}; union of {pct} intervals "
             f"{direct.union_ci}; bias-aware {pct} interval {direct.bias_aware.ci} "
             f"(worst-case bias {format_number(direct.bias_aware.max_bias)})",
             f"  breakdown of '{b.conclusion}': union {_scale(b.scale, 'union')}; bias-aware "
             f"{_scale(b.bias_aware_scale, 'bias-aware interval')}"]
    if b.allowance is not None and b.scale not in (None, 0):
        lines.append(f"  (a range of ±{format_number(b.allowance)} {unit} for every "
                     "instrument)")
    return lines


def prior_lines(prior) -> list[str]:
    """The interval under the normal prior on the direct effects."""
    if prior is None:
        return []
    pct = f"{100 * prior.confidence_level:g}%"
    p = prior.prior
    return [f"Prior on the direct effects: each ~ N({p.mean:g}, {p.sd:g}²) "
            f"({UNIT_WORDS[p.unit]}), independent",
            f"  {pct} prior interval {prior.interval} (centre {format_number(prior.center)}, "
            f"sd {format_number(prior.sd)})"]


def invalid_lines(count) -> list[str]:
    """The invalid-count breakdown as a count and a share of the instruments."""
    if count is None:
        return []
    if count.count is None:
        return [f"Invalid-count breakdown: none — the IVW interval already fails "
                f"'{count.conclusion}'"]
    exact = ("exact" if count.exact else
             f"certified; at most {count.upper} (gap {count.gap}) not excluded")
    return [f"Invalid-count breakdown of '{count.conclusion}': any {count.count} of "
            f"{count.instruments} instruments ({format_number(100 * count.share, 3)}%) may be "
            f"invalid with the conclusion kept ({exact}; {count.method})"]
