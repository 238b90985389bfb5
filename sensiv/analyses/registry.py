"""The analysis registry (first version: plain-text summaries only)."""

from __future__ import annotations


def _text_functions() -> dict:
    from sensiv.estimation.iv import IVFit
    from sensiv.partial_id.correlation_results import CorrelationBounds
    from sensiv.partial_id.discrete_results import DiscreteBounds
    from sensiv.present.summary import fit_summary, prior_summary, sweep_summary
    from sensiv.present.text_correlation import correlation_summary
    from sensiv.present.text_discrete import discrete_summary
    from sensiv.sensitivity.adaptive import AdaptiveResult, adaptive_text
    from sensiv.sensitivity.bounds import SweepResult
    from sensiv.sensitivity.calibrate import Calibration, calibration_text
    from sensiv.sensitivity.prior import PriorResult
    from sensiv.sensitivity.published import PublishedResult, _summary_lines as pub_lines

    return {IVFit: fit_summary, SweepResult: sweep_summary, PriorResult: prior_summary,
            AdaptiveResult: adaptive_text, Calibration: calibration_text,
            DiscreteBounds: discrete_summary, CorrelationBounds: correlation_summary,
            PublishedResult: lambda r: "\n".join(pub_lines(r))}


def describe(result: object) -> str:
    """Plain-text summary of ``result`` (see :func:`sensiv.core.results.describe`)."""
    return _text_functions()[type(result)](result)
