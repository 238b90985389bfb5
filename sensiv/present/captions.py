"""Captions of the figures in a report: what each figure shows, in words (formatting only).

A report names a figure by what it draws, never by its file path.  ``figure_caption(kind,
figure, result)`` takes the analysis kind's name (``"sweep"``), the figure's name within it
(``"curve"``) and the result; a figure it does not know gets a generic sentence naming the
analysis, so a new kind never shows a path.
"""

from __future__ import annotations

from sensiv.core import labels
from sensiv.core.results import format_number


def _names(names) -> str:
    names = [labels.name(name) for name in names]
    return names[0] if len(names) == 1 else ", ".join(names[:-1]) + " and " + names[-1]


def _pct(result) -> str:
    return f"{100 * getattr(result, 'confidence_level', 0.95):g}%"


def _fit(result) -> str:
    focus = result.treatments[0]
    return (f"The 2SLS estimate of the effect of {labels.name(focus)} with its "
            f"{_pct(result)} interval"
            + (" and the Anderson–Rubin set" if result.ar_set is not None else "")
            + ", all assuming that the exclusion restriction holds exactly.")


def _sweep_subject(result) -> tuple[str, str, str]:
    """(effect, instruments, source words) of a sweep or of a stress test of printed numbers."""
    if hasattr(result, "reported"):
        return "the printed effect", "the instrument", " (from the printed numbers only)"
    return f"the effect of {labels.name(result.focus)}", _names(result.instruments), ""


def _sweep_curve(result) -> str:
    effect, instruments, source = _sweep_subject(result)
    parts = ["the identified set", f"the union of {_pct(result)} intervals"]
    if getattr(result, "bias_aware", None) is not None:
        parts.append(f"the bias-aware {_pct(result)} interval")
    text = (f"How {effect} moves as the bound on the direct effect of {instruments} grows from "
            f"zero{source}: {_names(parts)}; the grey band is the stated range")
    if result.breakdown.scale is not None and result.breakdown.scale > 0:
        text += (", and the dot marks the breakdown, the smallest bound at which the "
                 f"interval reaches θ = {format_number(result.breakdown.threshold)}")
    return text + "."


def _sweep_frontier(result) -> str:
    effect, instruments, source = _sweep_subject(result)
    return (f"Breakdown frontier{source}: for every threshold θ, the smallest bound on the "
            f"direct effect of {instruments} at which the union of {_pct(result)} intervals "
            f"for {effect} reaches θ; above and below the line the conclusion β > θ or "
            "β < θ holds.")


def _prior_map(result) -> str:
    return (f"The prior interval for the effect of {labels.name(result.focus)} over a grid of "
            f"prior means "
            f"and spreads of the direct effect of {_names(result.instruments)}: where it keeps "
            "the sign of 2SLS, where it contains the threshold and where the sign reverses.")


def _corrbound(result) -> str:
    return (f"Bounds on the effect of {labels.name(result.treatment)} and their "
            f"{_pct(result)} interval as "
            "the allowed ratio r̄ of each instrument's correlation with the error to the "
            "treatment's grows from 0 (the exclusion restriction).")


def _discrete(result) -> str:
    t = result.table
    return (f"Bounds on the average effect of {labels.name(t.treatment)} on "
            f"{labels.name(t.outcome)} over all units (a "
            "different quantity from the complier effect that 2SLS estimates) as the budget ε, "
            f"the share of units whose outcome {labels.name(t.instrument)} changes directly, "
            "grows from 0.")


def _sweep_polytope(result) -> str:
    return (f"The stated polytope of direct effects of {_names(result.instruments)} (shaded), "
            "its constraints (dashed) and its bounding box (dotted), with the polytope scaled "
            "to the breakdown; the sensitivity curve scales this set.")


def _calibrate(result) -> str:
    return (f"Leave-one-out yardsticks: the direct effect of {_names(result.instruments)} on "
            f"{labels.name(result.outcome)} that matches the shift in its reduced form when "
            f"each control is "
            "left out, in outcome units and as a share of the reduced form; reference "
            "magnitudes, not estimates of the true direct effect.")


def _per_instrument_scatter(result) -> str:
    return (f"Each of the {result.associations.count} instruments' reduced-form association "
            "against its first-stage association (oriented so the first stage is positive, "
            "with ±1 se bars), and the fitted lines: IVW through the origin, MR-Egger with its "
            "intercept, and the weighted median and mode-based estimates as slopes through "
            "the origin.")


def _per_instrument_curve(result) -> str:
    d = result.direct
    return (f"How the IVW estimate's identified set, union of {_pct(result)} intervals and "
            f"bias-aware interval widen as the bound on every instrument's direct effect grows "
            f"from zero to beyond the stated range {d.allowance.text}, with the breakdown of "
            f"'{d.breakdown.conclusion}' marked.")


def _per_instrument_prior_map(result) -> str:
    return (f"Where the {_pct(result)} prior interval of the IVW estimate keeps the conclusion, "
            "over normal priors on every instrument's direct effect with mean μ and SD τ; "
            "the stated prior is marked.")


_CAPTIONS = {
    ("fit", "summary"): _fit,
    ("sweep", "curve"): _sweep_curve,
    ("sweep", "frontier"): _sweep_frontier,
    ("sweep", "polytope"): _sweep_polytope,
    ("published", "curve"): _sweep_curve,
    ("published", "frontier"): _sweep_frontier,
    ("prior", "map"): _prior_map,
    ("corrbound", "curve"): _corrbound,
    ("discrete", "curve"): _discrete,
    ("calibrate", "yardsticks"): _calibrate,
    ("per_instrument", "scatter"): _per_instrument_scatter,
    ("per_instrument", "curve"): _per_instrument_curve,
    ("per_instrument", "prior-map"): _per_instrument_prior_map,
}

SUMMARY_CAPTION = "Every analysis of this study as one interval, each under its own assumption."


def figure_caption(kind: str, figure: str, result) -> str:
    """What the figure ``figure`` of an analysis of kind ``kind`` shows, as one sentence or
    two (a generic sentence for a figure this module does not know)."""
    build = _CAPTIONS.get((kind, figure))
    if build is None:
        return f"The {figure} figure of the {kind} analysis."
    return build(result)
