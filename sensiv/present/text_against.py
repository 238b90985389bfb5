"""The breakdown set against the leave-one-out yardsticks, in one sentence (formatting only).

"The conclusion (irrigation_hours effect > 0) survives a direct effect of height_m up to
0.0416 (90.06% of its reduced form); leaving out soil would imply 0.000219, 0.53% of that."
"""

from __future__ import annotations

from sensiv.core import labels
from sensiv.core.results import format_number
from sensiv.present.tables import markdown_table


def ratio_words(ratio: float) -> str:
    """``4 times as large`` for a ratio of at least 1, ``0.53% of that`` below it."""
    if ratio >= 1:
        return f"{format_number(ratio, 2)} times as large"
    return f"{format_number(100 * ratio, 2)}% of that"


def _part(comparison, k: int, z: str) -> str:
    b, rf = comparison.breakdown[k], comparison.breakdown_rf[k]
    share = f" ({format_number(100 * rf)}% of its reduced form)" if rf is not None else ""
    text = f"a direct effect of {labels.name(z)} up to {format_number(b)}{share}"
    item = next((i for i in comparison.largest if i.instrument == z), None)
    if item is not None and item.ratio is not None:
        text += (f"; leaving out {labels.name(item.yardstick)} would imply "
                 f"{format_number(item.implied)}, "
                 f"{ratio_words(item.ratio)}")
    return text


def against_sentence(comparison) -> str:
    """One sentence: the breakdown direct effect per instrument and the largest yardstick of
    each beside it; without a conclusion or a breakdown, the largest yardstick alone."""
    if comparison.conclusion.startswith("none"):
        return ("There is no conclusion at zero direct effect to set against the yardsticks "
                f"({labels.leading(comparison.conclusion)}).")
    if any(b is None for b in comparison.breakdown):
        largest = "; ".join(f"leaving out {labels.name(i.yardstick)} would imply a direct "
                            f"effect of {labels.name(i.instrument)} of "
                            f"{format_number(i.implied)}"
                            for i in comparison.largest)
        return (f"The conclusion ({labels.leading(comparison.conclusion)}) does not break within the scales "
                "examined" + (f"; {largest}." if largest else "."))
    parts = [_part(comparison, k, z) for k, z in enumerate(comparison.instruments)]
    together = " together" if len(parts) > 1 else ""
    return (f"The conclusion ({labels.leading(comparison.conclusion)}) survives{together} "
            + "; and ".join(parts) + ".")


HEADING = "Against the leave-one-out yardsticks (a judgement, not a test)"


def combined_text(sweep_text: str, calibration_text: str, comparison) -> str:
    """``sweep --calibrate`` on the terminal: the sweep, the sentence, then the calibration."""
    return "\n".join([sweep_text, "", HEADING + ":", "  " + against_sentence(comparison), "",
                      calibration_text])


def combined_markdown(comparison) -> str:
    """``against_yardsticks.md``: the sentence and every yardstick beside the breakdown."""
    rows = [[labels.name(i.instrument), f"without {labels.name(i.yardstick)}",
             format_number(i.implied),
             "—" if i.implied_rf is None else f"{format_number(100 * i.implied_rf)}%",
             "—" if i.ratio is None else format_number(i.ratio, 2)]
            for i in comparison.items]
    header = ["instrument", "yardstick", "implied |direct effect|", "share of reduced form",
              "ratio to the breakdown"]
    return (f"# {HEADING}\n\n{against_sentence(comparison)}\n\n"
            + markdown_table(header, rows)
            + "\nA ratio above 1: a violation as large as the yardstick would overturn the "
              "conclusion; below 1: the conclusion survives it.\n")
