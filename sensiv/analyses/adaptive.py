"""Registry entry of the falsification adaptive set: a part of ``sweep --adaptive``, never run
or tabulated on its own; the registry knows it for its text."""

from __future__ import annotations

from sensiv.analyses.kind import AnalysisKind
from sensiv.present import text_adaptive
from sensiv.sensitivity import adaptive

ENTRY = AnalysisKind(
    name="adaptive", result_type=adaptive.AdaptiveResult, title="Falsification adaptive set",
    table_title="Falsification adaptive set", text=text_adaptive.adaptive_text)
