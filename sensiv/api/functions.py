"""The analyses as Python functions that read like the command line.

Each takes the data first — a pandas or polars DataFrame, a path to a CSV, Parquet or ``.dta``
file, a prepared :mod:`sensiv.data` source, or a fitted IV model of linearmodels or pyfixest —
then the model's roles as keywords named like the CLI options (``outcome=``, ``treatment=``,
``instruments=``, ``controls=``, ``cluster=``, ``weight=``, ``where=``, ``categorical=``,
``constant=``), or a ready ``spec``, and the analysis' own options with the CLI's value syntax
(``direct="-0.02:0.02"``, ``prior="normal:0:0.01"``, ``se="robust"``, ``level=0.95``).  A
string stands for a one-element list; ranges may be ``(low, high)`` tuples.  Messages name the
keyword (``direct=``), not the option.

From a fitted model the rows, roles, covariance type and small-sample convention are the
model's, so at zero direct effect the sweep reproduces its coefficient and standard error.

Examples
--------
>>> import sensiv
>>> from sensiv.demo import generators
>>> frame = generators.irrigation(n=600).frame   # invented demo data
>>> res = sensiv.sweep(frame, outcome="maize_yield", treatment="irrigation_hours",
...                    instruments="height_m", controls=["plot_ha", "soil"],
...                    cluster="village", direct="-0.005:0.005")
>>> res.union_ci.low < res.estimate < res.union_ci.high
True
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from sensiv.api.arguments import (ROLES, api_terms, as_frame, direct_ranges, level_of, prior_laws,
                                  spec_of_roles)
from sensiv.api.fitted import from_fitted, is_fitted_model
from sensiv.core import labels as column_labels
from sensiv.core.errors import InputError
from sensiv.core.results import with_labels
from sensiv.data.spec import used_columns
from sensiv.estimation import iv
from sensiv.partial_id import correlation
from sensiv.sensitivity import bounds
from sensiv.sensitivity import calibrate as calibration
from sensiv.sensitivity import prior as prior_layer


def _inputs(data: Any, spec: Any, roles: dict[str, Any], se: str | None,
            small: bool | None) -> tuple[Any, Any, str | None, bool]:
    """``(data, spec, se, small)`` for a layer function: a fitted model gives its own."""
    unknown = sorted(set(roles) - set(ROLES))
    if unknown:
        raise InputError(f"unknown argument{'s' if len(unknown) > 1 else ''} "
                         f"{', '.join(u + '=' for u in unknown)}; the roles are "
                         f"{', '.join(r + '=' for r in ROLES)}")
    if is_fitted_model(data):
        if spec is not None:
            raise InputError("spec= cannot be combined with a fitted model (its roles are "
                              "the model's); drop spec=")
        fitted = from_fitted(data, roles)
        if se is not None and se != fitted.se:
            raise InputError(f"se='{se}' differs from the fitted model's covariance "
                              f"('{fitted.se}'); drop se= or refit the model")
        if small is not None and bool(small) != fitted.small:
            raise InputError(f"small={small} differs from the fitted model's small-sample "
                              f"convention (small={fitted.small}); drop small=")
        return fitted.frame, fitted.spec, fitted.se, fitted.small
    data = as_frame(data)
    given = {k: v for k, v in roles.items() if v is not None}
    if spec is None and not hasattr(data, "chunks"):
        spec = spec_of_roles(given)
    elif given:
        raise InputError(f"{', '.join(k + '=' for k in sorted(given))} cannot be combined "
                          "with spec= or a prepared source; give the roles one way")
    return data, spec, se, bool(small)


def _labels_for(labels: Any, data: Any, spec: Any) -> column_labels.Labels | None:
    """``labels=`` ({column: text}) checked against the columns of the model (``None``: no
    labels)."""
    if labels is None:
        return None
    parsed = column_labels.parse(labels, option="labels=")
    spec = spec if spec is not None else getattr(data, "spec", None)
    if spec is not None:
        column_labels.check_columns(parsed, used_columns(spec), option="labels=")
    return parsed


def _labelled(result, labels: column_labels.Labels | None):
    """The result presented with ``labels`` (itself without them)."""
    return result if labels is None else with_labels(result, labels)


def fit(data, spec=None, *, se: str | None = None, level: float = 0.95,
        small: bool | None = None, chunk_rows: int | None = None,
        labels: Mapping[str, str] | None = None, **roles) -> iv.IVFit:
    """2SLS with diagnostics (:func:`sensiv.estimation.iv.fit`), arguments as the CLI's."""
    with api_terms():
        data, spec, se, small = _inputs(data, spec, roles, se, small)
        names = _labels_for(labels, data, spec)
        result = iv.fit(data, spec, se=se, confidence_level=level_of(level), small=small,
                        chunk_rows=chunk_rows)
        return _labelled(result, names)


def sweep(data, spec=None, *, direct: Any = None, polytope: str | None = None,
          se: str | None = None, level: float = 0.95, small: bool | None = None,
          threshold: float = 0.0, points: int = bounds.DEFAULT_POINTS,
          focus: str | None = None, adaptive: bool = False, chunk_rows: int | None = None,
          labels: Mapping[str, str] | None = None, **roles) -> bounds.SweepResult:
    """Direct-effect sweep (:func:`sensiv.sensitivity.bounds.sweep`).

    ``direct`` is one range per instrument: ``"-0.02:0.02"``, ``"-0.1:0.1rf"``,
    ``(-0.02, 0.02)`` or a list of these.
    """
    with api_terms():
        data, spec, se, small = _inputs(data, spec, roles, se, small)
        names = _labels_for(labels, data, spec)
        result = bounds.sweep(data, spec, direct=direct_ranges(direct), polytope=polytope,
                              se=se, confidence_level=level_of(level), small=small,
                              threshold=threshold, points=points, focus=focus,
                              adaptive=adaptive, chunk_rows=chunk_rows)
        return _labelled(result, names)


def prior(data, spec=None, *, prior: Any = None, prior_file: str | None = None,
          se: str | None = None, level: float = 0.95, small: bool | None = None,
          focus: str | None = None, draws: int = prior_layer.MC_DRAWS, seed: int | None = 0,
          threshold: float = 0.0, chunk_rows: int | None = None, progress: bool = True,
          labels: Mapping[str, str] | None = None, **roles) -> prior_layer.PriorResult:
    """Prior interval (:func:`sensiv.sensitivity.prior.prior_analysis`); ``prior`` is one law
    per instrument, e.g. ``"normal:0:0.01"`` or a list."""
    with api_terms():
        data, spec, se, small = _inputs(data, spec, roles, se, small)
        names = _labels_for(labels, data, spec)
        result = prior_layer.prior_analysis(
            data, spec, priors=prior_laws(prior), prior_file=prior_file, se=se,
            confidence_level=level_of(level), small=small, focus=focus, draws=draws,
            seed=seed, chunk_rows=chunk_rows, threshold=threshold, progress=progress)
        return _labelled(result, names)


def calibrate(data, spec=None, *, groups: Mapping[str, Sequence[str]] | None = None,
              no_first_stage_group: str | None = None, se: str | None = None,
              level: float = 0.95, small: bool | None = None, chunk_rows: int | None = None,
              labels: Mapping[str, str] | None = None, **roles) -> calibration.Calibration:
    """Calibration yardsticks (:func:`sensiv.sensitivity.calibrate.calibrate`)."""
    with api_terms():
        data, spec, se, small = _inputs(data, spec, roles, se, small)
        names = _labels_for(labels, data, spec)
        result = calibration.calibrate(data, spec, groups=groups,
                                       no_first_stage_group=no_first_stage_group, se=se,
                                       confidence_level=level_of(level), small=small,
                                       chunk_rows=chunk_rows)
        return _labelled(result, names)


def corrbound(data, spec=None, *, max_ratio: float = correlation.DEFAULT_MAX_RATIO,
              endogeneity: str = "unknown", threshold: float = 0.0,
              points: int = correlation.DEFAULT_POINTS, reps: int = correlation.DEFAULT_REPS,
              seed: int | None = None, level: float = 0.95, chunk_rows: int | None = None,
              progress: bool = True, labels: Mapping[str, str] | None = None,
              **roles) -> correlation.CorrelationBounds:
    """Correlation-restriction bounds (:func:`sensiv.partial_id.correlation.correlation_bounds`);
    from a fitted model only its rows and roles are used (the bootstrap has its own inference)."""
    with api_terms():
        data, spec, _, _ = _inputs(data, spec, roles, None, None)
        names = _labels_for(labels, data, spec)
        result = correlation.correlation_bounds(
            data, spec, max_ratio=max_ratio, endogeneity=endogeneity, threshold=threshold,
            points=points, reps=reps, seed=seed, confidence_level=level_of(level),
            chunk_rows=chunk_rows, progress=progress)
        return _labelled(result, names)
