"""``sensiv.per_instrument``: the per-instrument analysis of published associations
(``sensiv published --per-instrument``) as a Python function.

The table is a pandas or polars DataFrame or a path (CSV or Parquet); the column of each role is
a keyword named like the CLI option (``first_stage=``, ``first_stage_se=``, ``reduced_form=``,
``reduced_form_se=``, ``name=``); the options take the CLI's value syntax (``direct="-2:2se"``,
``prior="normal:0:1se"``), ``polytope=`` a polytope CSV file (``--direct-polytope``) and
``mode_bandwidth=`` the mode-based estimate's φ.  Messages name the keywords.
"""

from __future__ import annotations

from typing import Any

from sensiv.api.arguments import api_terms, as_frame, level_of, one_name

ROLE_KEYWORDS = {"first_stage": "first_stage=", "first_stage_se": "first_stage_se=",
                 "reduced_form": "reduced_form=", "reduced_form_se": "reduced_form_se=",
                 "name": "name="}
"""The keyword that names each role's column, for messages."""


def per_instrument(table: Any, *, first_stage: str | None = None,
                   first_stage_se: str | None = None, reduced_form: str | None = None,
                   reduced_form_se: str | None = None, name: str | None = None,
                   direct: str | None = None, polytope: str | None = None,
                   prior: str | None = None, weights: str = "first",
                   seed: int | None = None, reps: int | None = None,
                   mode_bandwidth: float | None = None, threshold: float = 0.0,
                   points: int | None = None, level: float = 0.95):
    """IVW, robust yardsticks, invalid-count breakdown and (with ``direct``, ``polytope`` or
    ``prior``) the direct-effect sensitivity of a per-instrument table; returns the
    :class:`~sensiv.sensitivity.published_table.PublishedTableResult` the command prints."""
    with api_terms():
        from sensiv.analyses.per_instrument import analyse
        from sensiv.sensitivity.kernel_mode import check_bandwidth
        from sensiv.sensitivity.published_table import DEFAULT_POINTS
        from sensiv.sensitivity.robust_estimators import DEFAULT_REPS

        columns = {"first_stage": one_name(first_stage, "first_stage"),
                   "first_stage_se": one_name(first_stage_se, "first_stage_se"),
                   "reduced_form": one_name(reduced_form, "reduced_form"),
                   "reduced_form_se": one_name(reduced_form_se, "reduced_form_se")}
        return analyse(as_frame(table), columns, one_name(name, "name"),
                       labels=ROLE_KEYWORDS, weights=weights,
                       confidence_level=level_of(level),
                       reps=DEFAULT_REPS if reps is None else reps, seed=seed,
                       phi=check_bandwidth(mode_bandwidth, "mode_bandwidth="),
                       require_egger=True, direct=direct, polytope=polytope, prior=prior,
                       threshold=threshold,
                       points=DEFAULT_POINTS if points is None else points)
