"""The analysis registry (first version: plain-text summaries only)."""

from __future__ import annotations


def _text_functions() -> dict:
    from sensiv.estimation.iv import IVFit
    from sensiv.partial_id.correlation import CorrelationBounds, _summary_lines as corr_lines
    from sensiv.partial_id.discrete_results import DiscreteBounds, summary as discrete_text
    from sensiv.present.summary import fit_summary, prior_summary, sweep_summary
    from sensiv.present.text_adaptive import adaptive_text
    from sensiv.present.text_calibrate import calibration_text
    from sensiv.present.text_published import summary_lines as pub_lines
    from sensiv.sensitivity.adaptive import AdaptiveResult
    from sensiv.sensitivity.bounds import SweepResult
    from sensiv.sensitivity.calibrate import Calibration
    from sensiv.sensitivity.prior import PriorResult
    from sensiv.sensitivity.published import PublishedResult

    return {IVFit: fit_summary, SweepResult: sweep_summary, PriorResult: prior_summary,
            AdaptiveResult: adaptive_text, Calibration: calibration_text,
            DiscreteBounds: discrete_text,
            CorrelationBounds: lambda r: "\n".join(corr_lines(r, markdown=False)),
            PublishedResult: lambda r: "\n".join(pub_lines(r))}


def describe(result: object) -> str:
    """Plain-text summary of ``result`` (see :func:`sensiv.core.results.describe`)."""
    return _text_functions()[type(result)](result)
