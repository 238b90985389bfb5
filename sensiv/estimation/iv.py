r"""Two-stage least squares and its diagnostics, computed from moments: the API of the
estimation layer.

Model: ``y = X β + W κ + u`` with endogenous ``X`` (``k_x`` columns), excluded instruments ``Z``
(``k_z ≥ k_x``) and exogenous controls ``W`` (with a constant unless switched off).

Every quantity is computed from :class:`sensiv.estimation.moments.Moments` (pass 1) and, for
robust and cluster covariances, from one pass of score sums (pass 2); nothing is refitted on
rows.  The pieces live one concern to a module: design maps and their checks (``design``),
the solve (``least_squares``), covariances (``covariance``), the first stage
(``first_stage``), and the Anderson–Rubin set and overidentification test (``diagnostics``);
this module assembles them into an :class:`IVFit`.

Conventions (the same as the usual textbook and reference-library ones):

* classic: ``σ̂² = Σ wᵢûᵢ² / n``; robust: HC0; cluster: one-way sums of scores;
* ``small=True``: classic ``σ̂²`` divides by ``n − k``; robust is scaled by ``n/(n − k)``;
  cluster by ``G/(G − 1) · (n − 1)/(n − k)``; intervals and tests use t and F laws;
* analytic weights are normalised to mean one and enter as ``√wᵢ`` row scaling.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np

from sensiv.core.errors import FewClustersWarning, InputError, WeakInstrumentWarning
from sensiv.core.results import (Interval, Presentable, describe, format_number,
                                 intervals_to_lists, json_number)
from sensiv.data.where import filter_assumptions
from sensiv.estimation import distributions as dist
from sensiv.estimation import linalg
from sensiv.estimation.absorb import Absorption, absorb_assumptions, absorb_keys
from sensiv.estimation.absorbed_source import absorb_source
from sensiv.estimation.blas_threads import on_one_blas_thread
from sensiv.estimation.covariance import (check_clusters, coefficient_covariance,
                                          combine_two_way, few_clusters_notes,
                                          normalise_weights, psd_fix_note, score_blocks,
                                          two_way_keys)
from sensiv.estimation.design import CONSTANT, Design, build_design, check_design
from sensiv.estimation.diagnostics import OverId, anderson_rubin_set, overid_test
from sensiv.estimation.fit_options import (  # noqa: F401 (re-exported: iv.check_options, …)
    SE_TYPES, SEType, as_source, check_options, default_se)
from sensiv.estimation.first_stage import FirstStage, first_stage_covariance, first_stages
from sensiv.estimation.least_squares import LinearFit, solve_linear
from sensiv.estimation.moments import Moments, ScoreSums, check_rows
from sensiv.estimation.passes import moments_of, scores_of
from sensiv.estimation.tf import TF, tf_interval

# Rule-of-thumb first-stage F below which Wald inference is unreliable (Staiger & Stock 1997).
WEAK_F = 10.0
CAUTION = ("Caution: these estimates assume the exclusion restriction holds exactly. "
           "Sensitivity bounds hold only under the assumed ranges of direct effects, and no "
           "analysis here proves an instrument valid.")


# ----------------------------------------------------------------------------- results
@dataclass(frozen=True, slots=True)
class Coefficients:
    """Estimates with their covariance, in output order (treatments, controls, constant)."""

    names: tuple[str, ...]
    estimate: np.ndarray
    covariance: np.ndarray

    @property
    def se(self) -> np.ndarray:
        return np.sqrt(np.maximum(np.diag(self.covariance), 0.0))

    def value(self, name: str) -> float:
        return float(self.estimate[self.names.index(name)])

    def std_error(self, name: str) -> float:
        return float(self.se[self.names.index(name)])


@dataclass(frozen=True, slots=True)
class IVFit(Presentable):
    """A 2SLS fit with its diagnostics.

    Attributes
    ----------
    tsls, ols : Coefficients
        Output order: treatments, controls, then the constant.
    first_stages : tuple of FirstStage
        One per treatment.
    ar_set : tuple of Interval or None
        Anderson–Rubin confidence set for one treatment (possibly unbounded or a union).
    overid : OverId or None
        ``None`` when the model is exactly identified.
    """

    outcome: str
    treatments: tuple[str, ...]
    instruments: tuple[str, ...]
    controls: tuple[str, ...]
    constant: bool
    n: int
    n_dropped: int
    n_clusters: int | None
    se_type: str
    small: bool
    confidence_level: float
    weighted: bool
    tsls: Coefficients
    ols: Coefficients
    first_stages: tuple[FirstStage, ...]
    ar_set: tuple[Interval, ...] | None
    overid: OverId | None
    notes: tuple[str, ...] = field(default=())
    n_filtered: int = 0
    where: str | None = None
    cluster: str | tuple[str, ...] | None = None
    cluster_counts: tuple[int, ...] = ()
    psd_fix: bool = False
    bootstrap: object | None = None  # sensiv.estimation.wild_bootstrap.WildBootstrap
    tf: TF | None = None  # one treatment and one instrument only
    absorption: Absorption | None = None
    absorbed_parameters: int = 0

    @property
    def caution(self) -> str:
        return CAUTION

    @property
    def df_resid(self) -> int:
        return self.n - len(self.tsls.names) - self.absorbed_parameters

    def critical_value(self) -> float:
        """Two-sided critical value for Wald intervals: normal, or t(n − k) with ``small``."""
        upper = 0.5 + 0.5 * self.confidence_level
        if self.small:
            return dist.t_quantile(upper, self.df_resid)
        return dist.normal_quantile(upper)

    def conf_int(self, name: str) -> Interval:
        b = self.tsls.value(name)
        half = self.critical_value() * self.tsls.std_error(name)
        return Interval(b - half, b + half)

    def reported_names(self) -> tuple[str, ...]:
        return tuple(n for n in self.tsls.names if n != CONSTANT)

    def assumptions(self) -> list[str]:
        se_words = {"classic": "homoskedastic errors (classic covariance)",
                    "robust": "heteroskedasticity-robust covariance (HC0)",
                    "cluster": f"errors correlated within clusters ({self.n_clusters} clusters)"}
        if self.cluster_counts:
            se_words["cluster"] = ("errors correlated within clusters of either of two "
                                   "variables (two-way, Cameron, Gelbach & Miller 2011; "
                                   f"{self.cluster_counts[0]} and {self.cluster_counts[1]} "
                                   "clusters)")
        return [
            "exclusion restriction: the instruments move the outcome only through the "
            "treatment (assumed to hold exactly in this fit)",
            "instruments as good as randomly assigned given the controls, and relevant for "
            "the treatment (see the first-stage F)",
            "linear model with a constant effect of the treatment",
            se_words[self.se_type] + (", with small-sample corrections" if self.small else ""),
        ] + filter_assumptions(self.where, self.n_filtered) + absorb_assumptions(self) + (
            self.bootstrap.assumptions() if self.bootstrap is not None else [])

    def to_dict(self) -> dict:
        names = self.reported_names()
        out = {
            "n": self.n,
            "n_dropped": self.n_dropped,
            "n_filtered": self.n_filtered,
            "where": self.where,
            "coef": {k: json_number(self.tsls.value(k)) for k in names},
            "se": {k: json_number(self.tsls.std_error(k)) for k in names},
            "ci": {k: self.conf_int(k).to_list() for k in names},
            "ols": {"coef": {k: json_number(self.ols.value(k)) for k in names},
                    "se": {k: json_number(self.ols.std_error(k)) for k in names}},
            "first_stage": {fs.treatment: fs.to_dict() for fs in self.first_stages},
            "overid": self.overid.to_dict() if self.overid else None,
            "outcome": self.outcome,
            "treatments": list(self.treatments),
            "instruments": list(self.instruments),
            "controls": list(self.controls),
            "constant": self.constant,
            "se_type": self.se_type,
            "small": self.small,
            "confidence_level": self.confidence_level,
            "n_clusters": self.n_clusters,
            **two_way_keys(self),
            "weighted": self.weighted,
            "notes": list(self.notes),
            "assumptions": self.assumptions(),
            "caution": CAUTION,
        }
        if self.ar_set is not None:
            out["ar_set"] = intervals_to_lists(self.ar_set)
        if self.tf is not None:
            out["tf"] = self.tf.to_dict()
        if self.bootstrap is not None:
            out["bootstrap"] = self.bootstrap.to_dict()
        return out | absorb_keys(self)

    def __str__(self) -> str:
        return describe(self)


# ----------------------------------------------------------------------------- the fit
@dataclass(frozen=True, slots=True)
class Pieces:
    """Everything computed from moments before pass 2, reused by the sensitivity layers."""

    moments: Moments
    design: Design
    gram: np.ndarray
    tsls: LinearFit
    ols: LinearFit
    z_partialled: np.ndarray
    first_residuals: np.ndarray
    absorbed_parameters: int = 0

    @property
    def n(self) -> int:
        return self.moments.n


def prepare(moments: Moments, layout, absorbed: int = 0) -> Pieces:
    """Pass-1 algebra: design maps, checks, 2SLS, OLS and first-stage residual maps
    (``absorbed``: absorbed fixed-effect levels counted as parameters)."""
    if moments.n == 0:
        raise InputError("no rows left after dropping rows with missing values; check the "
                         "columns' missing values")
    design = build_design(moments, layout.outcome, layout.treatments, layout.instruments,
                          layout.controls, layout.constant)
    k_params = max(design.regressors.shape[1], design.instrument_set.shape[1])
    check_rows(moments, k_params + absorbed)
    gram = moments.augmented * (moments.n / moments.weight_sum)
    check_design(design, gram, moments)
    tsls = solve_linear(gram, design.y, design.regressors, design.instrument_set)
    ols = solve_linear(gram, design.y, design.regressors, design.regressors)
    w = design.w
    if w.shape[1]:
        coef = linalg.scaled_cholesky(w.T @ gram @ w).solve(w.T @ gram @ design.z)
        z_partialled = design.z - w @ coef
    else:
        z_partialled = design.z
    q = design.instrument_set
    targets = np.column_stack([design.x, design.y])
    first_coef = tsls.instrument_chol.solve(q.T @ gram @ targets)
    first_residuals = targets - q @ first_coef
    return Pieces(moments, design, gram, tsls, ols, z_partialled, first_residuals, absorbed)


def _output_order(design: Design) -> np.ndarray:
    """Permutation from solving order ``[const, controls, treatments]`` to output order."""
    k_w = len(design.control_names)
    k_x = len(design.treatments)
    named = [j for j, n in enumerate(design.control_names) if n != CONSTANT]
    const = [j for j, n in enumerate(design.control_names) if n == CONSTANT]
    return np.array([*(k_w + j for j in range(k_x)), *named, *const], dtype=int)


def _coefficients(design: Design, fit: LinearFit, cov_star: np.ndarray) -> Coefficients:
    order = _output_order(design)
    t = design.transform
    est = (t @ fit.params)[order]
    cov = (t @ cov_star @ t.T)[np.ix_(order, order)]
    names = tuple(design.regressor_names[j] for j in order)
    return Coefficients(names, est, 0.5 * (cov + cov.T))


def fit_from_moments(pieces: Pieces, sums: ScoreSums | None, layout, *, se: str,
                     confidence_level: float, small: bool, weighted: bool,
                     where: str | None = None, data_notes: tuple[str, ...] = (),
                     cluster=None, absorption: Absorption | None = None) -> IVFit:
    """Assemble the fit and its diagnostics from pass-1 pieces and pass-2 sums.

    ``where`` is the row filter the data went through (reported in the assumptions);
    ``data_notes`` are the data layer's notes (:attr:`sensiv.data.Source.notes`);
    ``cluster`` the cluster column(s), named in the few-clusters notes of two-way clustering.
    """
    n_clusters = sums.n_clusters if sums is not None else None
    meats = sums.meats if sums is not None else {}
    d = pieces.design
    n, gram, k_fe = pieces.n, pieces.gram, pieces.absorbed_parameters
    tsls = _coefficients(d, pieces.tsls,
                         coefficient_covariance(pieces.tsls, gram, n, meats.get("tsls"), se,
                                                small, n_clusters, k_fe))
    ols = _coefficients(d, pieces.ols,
                        coefficient_covariance(pieces.ols, gram, n, meats.get("ols"), se, small,
                                               n_clusters, k_fe))
    joint = first_stage_covariance(pieces, meats.get("first"), se, small, n_clusters)
    stages, coef, _ = first_stages(pieces, joint, se, small)
    ar = None
    if len(d.treatments) == 1:
        ar = anderson_rubin_set(pieces, joint, coef, confidence_level, small)
    notes = list(data_notes)
    for few in few_clusters_notes(sums, cluster) if se == "cluster" else []:
        notes.append(few)
        warnings.warn(few, FewClustersWarning, stacklevel=3)
    if se == "cluster" and psd_fix_note(sums):
        notes.append(psd_fix_note(sums))
    for fs in stages:
        strength = fs.effective_f if fs.effective_f is not None else fs.f
        label = "effective first-stage F" if fs.effective_f is not None else "first-stage F"
        if not strength >= WEAK_F:
            advice = ("rely on the Anderson-Rubin set" if ar is not None else
                      "sensiv computes the Anderson-Rubin set for one treatment only, so with "
                      f"{len(d.treatments)} treatments no weak-instrument-robust set is "
                      "available: read the Wald intervals with great care, compare each "
                      "treatment's first-stage F, and look for stronger instruments")
            message = (f"weak instrument: the {label} for '{fs.treatment}' is "
                       f"{format_number(strength, 3)} (< {WEAK_F:g}); 2SLS is biased towards "
                       f"OLS and its Wald interval may be far too narrow; {advice}")
            notes.append(message)
            warnings.warn(message, WeakInstrumentWarning, stacklevel=3)
    return IVFit(
        outcome=d.outcome, treatments=d.treatments, instruments=d.instruments,
        controls=tuple(layout.controls), constant=layout.constant, n=pieces.n,
        n_dropped=pieces.moments.n_dropped, n_clusters=n_clusters, se_type=se, small=small,
        confidence_level=confidence_level, weighted=weighted, tsls=tsls, ols=ols,
        first_stages=stages, ar_set=ar, overid=overid_test(pieces, sums, se),
        notes=tuple(notes), n_filtered=pieces.moments.n_filtered, where=where,
        cluster=cluster if se == "cluster" else None,
        cluster_counts=sums.cluster_counts if sums is not None and se == "cluster" else (),
        psd_fix=bool(sums is not None and sums.psd_fix),
        tf=tf_interval(tsls.value(d.treatments[0]), tsls.std_error(d.treatments[0]),
                       stages[0].f, confidence_level) if d.z.shape[1] == 1 else None,
        absorption=absorption, absorbed_parameters=k_fe)


@on_one_blas_thread
def fit_with_pieces(source, *, se: str, confidence_level: float, small: bool,
                    extra_blocks=None) -> tuple[IVFit, Pieces, ScoreSums | None]:
    """Two passes over ``source``: the fit plus the pass-1 pieces and pass-2 sums.

    ``extra_blocks(pieces)`` may add score requests (for the sensitivity layers) to the same
    second pass, so the rows are read exactly twice whatever is computed.
    """
    spec = source.spec
    check_options(se, spec.cluster, confidence_level)
    source = absorb_source(source)
    absorption = getattr(source, "absorption", None)
    layout = source.layout
    moments = moments_of(source, layout.columns)
    pieces = prepare(moments, layout, absorption.parameters(se) if absorption else 0)
    blocks = score_blocks(pieces, se) + (list(extra_blocks(pieces)) if extra_blocks else [])
    sums = None
    if blocks:
        sums = normalise_weights(
            scores_of(source, moments.mean, blocks, cluster=(se == "cluster")),
            moments)
        check_clusters(sums, spec.cluster)
        sums = combine_two_way(sums, small)
    result = fit_from_moments(pieces, sums, layout, se=se, confidence_level=confidence_level,
                              small=small, weighted=spec.weight is not None, where=spec.where,
                              data_notes=getattr(source, "notes", ()), cluster=spec.cluster,
                              absorption=absorption)
    return result, pieces, sums


def fit(data, spec=None, *, se: SEType | None = None, confidence_level: float = 0.95,
        small: bool = False, chunk_rows: int | None = None,
        absorb_tolerance: float | None = None) -> IVFit:
    """Fit 2SLS with diagnostics from a data source, a DataFrame or a file path.

    Parameters
    ----------
    data : sensiv.data source, pandas.DataFrame or path
    spec : sensiv.data.Spec, optional
        Required unless ``data`` is already a source.
    se : {"classic", "robust", "cluster"}, optional
        Default: "cluster" when the spec names a cluster variable, otherwise "robust".
    confidence_level : float
    small : bool
        Finite-sample corrections and t / F reference laws.
    chunk_rows : int, optional
        Rows per chunk when reading a file (memory does not grow with the file).
    absorb_tolerance : float, optional
        Relative tolerance of the alternating projections for several absorbed fixed
        effects (default 1e-10).

    Returns
    -------
    IVFit
    """
    source = as_source(data, spec, chunk_rows=chunk_rows, absorb_tolerance=absorb_tolerance)
    result, _, _ = fit_with_pieces(source, se=se or default_se(source.spec),
                                   confidence_level=confidence_level, small=small)
    return result
