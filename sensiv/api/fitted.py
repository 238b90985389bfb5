"""A fitted IV model of another library as sensiv's data, roles and covariance choice.

Recognised by duck typing, so neither library is a dependency:

* linearmodels ``IV2SLS(...).fit(...)`` results (``IVResults``): the model's ``dependent``,
  ``exog``, ``endog`` and ``instruments`` data (already evaluated from a formula, missing rows
  dropped), its ``weights``, and ``cov_type`` / ``cov_config`` (``debiased``, ``clusters``);
* pyfixest ``feols("y ~ w | x ~ z", ...)`` IV results (``Feiv``): the estimation frame
  ``_data`` (missing rows dropped), the coefficient names of the second and first stage,
  ``_weights_name``, ``_clustervar`` and ``_vcov_type_detail`` with the small-sample settings
  ``_ssc_dict``.

The covariance types map to sensiv's: homoskedastic → ``classic``, heteroskedasticity-robust
→ ``robust``, one-way clustered → ``cluster``; linearmodels' ``debiased=True`` and pyfixest's
default small-sample adjustments (``k_adj`` and ``G_adj``) → ``small=True``.  Anything else
(kernel / HAC, CRV3, two-way clusters, LIML or GMM, interacted fixed effects) is refused with
a message that names it; a pyfixest model's absorbed fixed effects become ``Spec.absorb``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from sensiv.core.errors import InputError
from sensiv.data import Spec

# Column names sensiv gives to arrays that a fitted model holds without a column of the frame.
CLUSTER_COLUMN = "cluster"
WEIGHT_COLUMN = "weight"
LINEARMODELS_SE = {"unadjusted": "classic", "homoskedastic": "classic", "robust": "robust",
                   "heteroskedastic": "robust", "clustered": "cluster"}
PYFIXEST_SE = {"iid": "classic", "hetero": "robust", "HC1": "robust", "CRV1": "cluster"}
PYFIXEST_INTERCEPT = "Intercept"


@dataclass(frozen=True, slots=True)
class FittedModel:
    """What sensiv needs of a fitted IV model: the rows, the roles and the covariance."""

    frame: Any          # pandas.DataFrame of the estimation rows
    spec: Spec
    se: str
    small: bool
    library: str


def is_fitted_model(data: Any) -> bool:
    """True for a fitted linearmodels or pyfixest result (by its attributes)."""
    return _is_linearmodels(data) or _is_pyfixest(data)


def _is_linearmodels(data: Any) -> bool:
    model = getattr(data, "model", None)
    return (hasattr(data, "cov_type") and hasattr(data, "cov_config")
            and all(hasattr(model, a) for a in ("dependent", "exog", "endog", "instruments")))


def _is_pyfixest(data: Any) -> bool:
    return all(hasattr(data, a) for a in ("_is_iv", "_coefnames", "_vcov_type_detail", "_data"))


def from_fitted(result: Any, roles: dict[str, Any]) -> FittedModel:
    """The data, roles and covariance of a fitted model; roles given beside it are refused
    (they are the model's)."""
    given = sorted(k for k, v in roles.items() if v is not None)
    if given:
        raise InputError(f"{', '.join(g + '=' for g in given)} cannot be combined with a "
                         "fitted model: its roles are taken from the model; drop them or pass "
                         "the DataFrame instead")
    if _is_linearmodels(result):
        return _from_linearmodels(result)
    if _is_pyfixest(result):
        return _from_pyfixest(result)
    raise InputError(f"{type(result).__name__} is not a fitted model sensiv can read; pass a "
                     "linearmodels IV2SLS result, a pyfixest IV feols result, or a DataFrame")


def _from_linearmodels(result: Any) -> FittedModel:
    import pandas as pd

    model = result.model
    kind = type(model).__name__
    if kind != "IV2SLS":
        raise InputError(f"a linearmodels {kind} result is not 2SLS; sensiv analyses 2SLS "
                         "estimates: refit with IV2SLS")
    cov_type = str(result.cov_type)
    if cov_type not in LINEARMODELS_SE:
        raise InputError(f"the covariance type '{cov_type}' of this linearmodels result is not "
                         "one sensiv has (classic, robust, cluster); refit with cov_type="
                         "'unadjusted', 'robust' or 'clustered'")
    config = dict(result.cov_config)
    parts = [model.dependent.pandas, model.exog.pandas, model.endog.pandas,
             model.instruments.pandas]
    frame = pd.concat([p.reset_index(drop=True) for p in parts], axis=1)
    frame = frame.loc[:, ~frame.columns.duplicated()]
    exog = list(model.exog.cols)
    constant = [c for c in exog if _is_constant(frame[c])]
    controls = [c for c in exog if c not in constant]
    cluster = weight = None
    if cov_type == "clustered":
        clusters = np.asarray(config["clusters"])
        if clusters.ndim == 2 and clusters.shape[1] > 1:
            raise InputError("this linearmodels result clusters in two dimensions; sensiv has "
                             "one-way clusters: refit with one cluster variable")
        frame[CLUSTER_COLUMN] = clusters.reshape(-1)
        cluster = CLUSTER_COLUMN
    weights = np.asarray(model.weights.ndarray, dtype=float).reshape(-1)
    if not np.allclose(weights, 1.0, rtol=0, atol=0):
        frame[WEIGHT_COLUMN] = weights
        weight = WEIGHT_COLUMN
    spec = Spec(outcome=model.dependent.cols[0], treatments=tuple(model.endog.cols),
                instruments=tuple(model.instruments.cols), controls=tuple(controls),
                cluster=cluster, weight=weight, constant=bool(constant))
    return FittedModel(frame, spec, LINEARMODELS_SE[cov_type], bool(config.get("debiased")),
                       "linearmodels")


def _is_constant(column: Any) -> bool:
    values = np.asarray(column, dtype=float)
    return values.size > 0 and values[0] != 0 and bool(np.all(values == values[0]))


def _from_pyfixest(result: Any) -> FittedModel:
    if not result._is_iv:
        raise InputError("this pyfixest result is not an IV regression; fit it with "
                         "feols('y ~ controls | treatment ~ instruments', ...)")
    absorb = _pyfixest_absorbed(result)
    detail = str(result._vcov_type_detail)
    if detail not in PYFIXEST_SE:
        raise InputError(f"the covariance type '{detail}' of this pyfixest result is not one "
                         "sensiv has (classic, robust, cluster); refit with vcov='iid', "
                         "'hetero' or {'CRV1': column}")
    frame = result._data
    second = [str(c) for c in result._coefnames]
    first = [str(c) for c in result._coefnames_z]
    # With fixed effects pyfixest reports no intercept, but the fixed effects absorb one: keep
    # sensiv's constant so that the levels are counted as pyfixest counts them (a fixed effect
    # nested in the cluster variable adds one parameter back, the intercept).
    constant = PYFIXEST_INTERCEPT in second or bool(result._has_fixef)
    exog = [c for c in second if c in first and c != PYFIXEST_INTERCEPT]
    treatments = [c for c in second if c not in first]
    instruments = [c for c in first if c not in second]
    missing = [c for c in exog + treatments + instruments + [str(result._depvar)]
               if c not in frame.columns]
    if missing:
        raise InputError(f"the pyfixest model uses terms that are not columns of its data "
                         f"({', '.join(missing)}); put the transformed columns in the frame "
                         "and refit, or pass the DataFrame with its roles")
    clusters = list(result._clustervar or [])
    if len(clusters) > 1:
        raise InputError(f"this pyfixest result clusters by {' and '.join(clusters)}; sensiv "
                         "has one-way clusters: refit with one cluster column")
    if result._weights_name is not None and result._weights_type != "aweights":
        raise InputError(f"this pyfixest result uses {result._weights_type}; sensiv takes "
                         "analytic weights: refit with weights_type='aweights'")
    spec = Spec(outcome=str(result._depvar), treatments=tuple(treatments),
                instruments=tuple(instruments), controls=tuple(exog),
                cluster=clusters[0] if clusters else None, weight=result._weights_name,
                constant=constant, absorb=absorb)
    return FittedModel(frame, spec, PYFIXEST_SE[detail], _pyfixest_small(result), "pyfixest")


def _pyfixest_absorbed(result: Any) -> tuple[str, ...]:
    """The fixed effects a pyfixest model absorbs (``f1+f2``); interactions (``f1^f2``) are
    refused."""
    if not result._has_fixef:
        return ()
    text = str(result._fixef)
    names = tuple(name.strip() for name in text.split("+"))
    if any("^" in name for name in names):
        raise InputError(f"this pyfixest result absorbs interacted fixed effects ({text}); "
                         "sensiv absorbs plain columns: add the interaction as a column and "
                         "refit")
    return names


def _pyfixest_small(result: Any) -> bool:
    """pyfixest's small-sample settings as sensiv's one switch: both adjustments on (its
    default) is ``small=True``, both off is ``False``; a mix sensiv cannot reproduce."""
    ssc = dict(result._ssc_dict)
    k_adj, g_adj = bool(ssc.get("k_adj", True)), bool(ssc.get("G_adj", True))
    if result._vcov_type_detail != "CRV1":
        return k_adj
    if k_adj != g_adj:
        raise InputError("this pyfixest result adjusts for the number of coefficients but not "
                         "of clusters (or the reverse); sensiv applies both or neither: refit "
                         "with ssc=pf.ssc(k_adj=..., G_adj=...) set alike")
    return k_adj
