r"""Two-stage least squares and its diagnostics, computed from moments.

Model: ``y = X β + W κ + u`` with endogenous ``X`` (``k_x`` columns), excluded instruments ``Z``
(``k_z ≥ k_x``) and exogenous controls ``W`` (with a constant unless switched off).

Every quantity is computed from :class:`sensiv.estimation.moments.Moments` (pass 1) and, for robust and
cluster covariances, from one pass of score sums (pass 2); nothing is refitted on rows.  Linear
maps act on the augmented centred row ``d̃ = [1, d − μ]``.  With a constant, slopes are solved
in centred coordinates and the intercept recovered by an exact reparameterisation
``θ = T θ*``, so a column whose mean dwarfs its spread does not spoil the solve.

Conventions (the same as the usual textbook and reference-library ones):

* classic: ``σ̂² = Σ wᵢûᵢ² / n``; robust: HC0; cluster: one-way sums of scores;
* ``small=True``: classic ``σ̂²`` divides by ``n − k``; robust is scaled by ``n/(n − k)``;
  cluster by ``G/(G − 1) · (n − 1)/(n − k)``; intervals and tests use t and F laws;
* analytic weights are normalised to mean one and enter as ``√wᵢ`` row scaling.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Literal

import numpy as np

from sensiv.estimation import distributions as dist
from sensiv.estimation import linalg
from sensiv.core.errors import InputError, WeakInstrumentWarning
from sensiv.estimation.moments import Moments, ScoreBlock, ScoreSums, accumulate, check_rows, score_sums
from sensiv.core.results import Interval, describe, format_number, intervals_to_lists, json_number

SEType = Literal["classic", "robust", "cluster"]
SE_TYPES: tuple[str, ...] = ("classic", "robust", "cluster")
CONSTANT = "const"
# A column whose standard deviation is below this fraction of its root mean square is constant
# up to rounding (a mean of 1e6 with unit spread is still well within double precision).
CONSTANT_RELATIVE_SD = 1e-12
# Rule-of-thumb first-stage F below which Wald inference is unreliable (Staiger & Stock 1997).
WEAK_F = 10.0
CAUTION = ("Caution: these estimates assume the exclusion restriction holds exactly. "
           "Sensitivity bounds hold only under the assumed ranges of direct effects, and no "
           "analysis here proves an instrument valid.")


# ----------------------------------------------------------------------------- design maps
@dataclass(frozen=True, slots=True)
class Design:
    """Linear maps from the augmented centred row ``[1, d − μ]`` to each column group.

    ``controls`` holds the exogenous regressors in solving order: the constant first (when
    present), then the named controls.  ``transform`` maps parameters solved in centred
    coordinates to the raw parameters, ordered ``[controls..., treatments...]``.
    """

    outcome: str
    treatments: tuple[str, ...]
    instruments: tuple[str, ...]
    control_names: tuple[str, ...]
    y: np.ndarray
    x: np.ndarray
    z: np.ndarray
    w: np.ndarray
    transform: np.ndarray

    @property
    def regressors(self) -> np.ndarray:
        return np.hstack([self.w, self.x])

    @property
    def instrument_set(self) -> np.ndarray:
        return np.hstack([self.w, self.z])

    @property
    def regressor_names(self) -> tuple[str, ...]:
        return (*self.control_names, *self.treatments)


def build_design(moments: Moments, outcome: str, treatments: Sequence[str],
                 instruments: Sequence[str], controls: Sequence[str], constant: bool) -> Design:
    """Selection maps for the roles, with the intercept reparameterisation when ``constant``."""
    p = len(moments.columns)
    index = {name: j for j, name in enumerate(moments.columns)}

    def raw(name: str) -> np.ndarray:
        col = np.zeros(p + 1)
        col[0] = moments.mean[index[name]]
        col[1 + index[name]] = 1.0
        return col

    def centred(name: str) -> np.ndarray:
        col = np.zeros(p + 1)
        col[1 + index[name]] = 1.0
        return col

    pick = centred if constant else raw
    w_cols = [pick(c) for c in controls]
    names = list(controls)
    if constant:
        one = np.zeros(p + 1)
        one[0] = 1.0
        w_cols.insert(0, one)
        names.insert(0, CONSTANT)
    k_w = len(w_cols)
    w = np.column_stack(w_cols) if w_cols else np.zeros((p + 1, 0))
    x = np.column_stack([pick(t) for t in treatments])
    z = np.column_stack([pick(i) for i in instruments])
    k = k_w + len(treatments)
    transform = np.eye(k)
    if constant:
        means = np.array([moments.mean[index[n]] for n in (*controls, *treatments)])
        transform[0, 1:] = -means
    return Design(outcome, tuple(treatments), tuple(instruments), tuple(names), raw(outcome),
                  x, z, w, transform)


def _constant_columns(moments: Moments) -> set[str]:
    """Columns whose spread is negligible next to their level (or exactly zero)."""
    var = np.diag(moments.comoment) / moments.weight_sum
    level = var + moments.mean**2
    return {name for name, v, m in zip(moments.columns, var, level)
            if not v > CONSTANT_RELATIVE_SD**2 * m}


def check_design(design: Design, weighted_gram: np.ndarray, moments: Moments) -> None:
    """Raise :class:`InputError` for constant or collinear outcome, regressors or instruments."""
    constant = _constant_columns(moments)
    roles = [(design.outcome, "outcome"), *((t, "treatment") for t in design.treatments),
             *((i, "instrument") for i in design.instruments),
             *((c, "control") for c in design.control_names if c != CONSTANT)]
    for name, role in roles:
        if name in constant:
            raise InputError(f"{role} '{name}' is constant in the {moments.n} rows used; "
                             f"choose a {role} that varies")
    n_w = len(design.control_names)
    for maps, names, role in (
        (design.instrument_set, (*design.control_names, *design.instruments), "instrument"),
        (design.regressors, (*design.control_names, *design.treatments), "treatment"),
    ):
        gram = maps.T @ weighted_gram @ maps
        found = linalg.first_dependent_column(gram)
        if found is None:
            continue
        j, share = found
        name = names[j]
        if j < n_w:
            raise InputError(f"control '{name}' is collinear with the constant and the controls "
                             "listed before it; drop it (or pass --no-constant if it completes "
                             "a full set of indicators)")
        raise InputError(
            f"{role} '{name}' is collinear with the controls (and the {role}s before it): only "
            f"a share {share:.1e} of its variation is left after partialling them out; drop it "
            f"or choose another {role}")


# ----------------------------------------------------------------------------- solving
@dataclass(frozen=True, slots=True)
class LinearFit:
    """A 2SLS (or OLS, when instruments = regressors) solve in augmented coordinates.

    ``params`` are in solving coordinates; ``bread = (X̂'X̂)⁻¹``; ``fitted`` maps rows to
    ``X̂``; ``residual`` maps rows to ``û``.
    """

    params: np.ndarray
    bread: np.ndarray
    fitted: np.ndarray
    residual: np.ndarray
    instrument_chol: linalg.ScaledCholesky


def solve_linear(gram: np.ndarray, y: np.ndarray, regressors: np.ndarray,
                 instruments: np.ndarray) -> LinearFit:
    r"""2SLS from the weighted Gram matrix ``M`` of the augmented rows.

    .. math::

        \hat θ = (R'P_Q R)^{-1} R'P_Q y, \qquad P_Q = Q(Q'Q)^{-1}Q'

    computed as a least-squares problem ``L⁻¹Q'R θ ≈ L⁻¹Q'y`` (``Q'Q = LL'``) by QR, with
    columns scaled to unit length; no explicit inverse of a cross-product matrix.
    """
    from scipy.linalg import solve_triangular

    qq = instruments.T @ gram @ instruments
    chol = linalg.scaled_cholesky(qq)
    c = chol.whiten(instruments.T @ gram @ regressors)
    h = chol.whiten(instruments.T @ gram @ y)
    r_scale = np.sqrt(np.sum(c * c, axis=0))
    if np.any(r_scale == 0):
        raise InputError("the instruments are orthogonal to a regressor in these data, so it "
                         "is not identified; check the instruments")
    q_fac, r_fac = np.linalg.qr(c / r_scale)
    if np.min(np.abs(np.diag(r_fac))) < math.sqrt(linalg.COLLINEAR_SHARE):
        raise InputError("the first stage is rank deficient: the instruments do not move the "
                         "treatments independently of each other; add or change instruments")
    params = solve_triangular(r_fac, q_fac.T @ h) / r_scale
    r_inv = solve_triangular(r_fac, np.eye(r_fac.shape[0]))
    bread = (r_inv @ r_inv.T) / np.outer(r_scale, r_scale)
    projection = chol.solve(instruments.T @ gram @ regressors)
    fitted = instruments @ projection
    residual = y - regressors @ params
    return LinearFit(params, 0.5 * (bread + bread.T), fitted, residual, chol)


def small_factor(se: str, small: bool, n: int, k: int, n_clusters: int | None) -> float:
    """Finite-sample factor of a covariance: ``n/(n−k)``, or ``G/(G−1)·(n−1)/(n−k)`` for
    clusters; 1 without ``small``."""
    if not small:
        return 1.0
    if se == "cluster":
        return n_clusters / (n_clusters - 1) * (n - 1) / (n - k)
    return n / (n - k)


def sandwich(se: str, bread: np.ndarray, sigma2: float | None, meat: np.ndarray | None,
             factor: float) -> np.ndarray:
    """``σ̂² B`` (classic) or ``B Ω B`` (robust, cluster), times the small-sample factor."""
    if se == "classic":
        cov = sigma2 * bread
    else:
        cov = bread @ meat @ bread
    cov = factor * cov
    return 0.5 * (cov + cov.T)


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
class FirstStage:
    """First-stage regression of one treatment on the instruments (controls partialled out)."""

    treatment: str
    coef: dict[str, float]
    se: dict[str, float]
    f: float
    f_df: tuple[int, int | None]
    f_p_value: float
    partial_r2: float
    effective_f: float | None

    def to_dict(self) -> dict:
        return {"coef": {k: json_number(v) for k, v in self.coef.items()},
                "se": {k: json_number(v) for k, v in self.se.items()},
                "f": json_number(self.f), "f_df": list(self.f_df),
                "f_p_value": json_number(self.f_p_value),
                "partial_r2": json_number(self.partial_r2),
                "effective_f": json_number(self.effective_f)}


@dataclass(frozen=True, slots=True)
class OverId:
    """Test of overidentifying restrictions."""

    name: str
    stat: float
    df: int
    p_value: float

    def to_dict(self) -> dict:
        return {"name": self.name, "stat": json_number(self.stat), "df": self.df,
                "p_value": json_number(self.p_value)}


@dataclass(frozen=True, slots=True)
class IVFit:
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

    @property
    def caution(self) -> str:
        return CAUTION

    @property
    def df_resid(self) -> int:
        return self.n - len(self.tsls.names)

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
        return [
            "exclusion restriction: the instruments move the outcome only through the "
            "treatment (assumed to hold exactly in this fit)",
            "instruments as good as randomly assigned given the controls, and relevant for "
            "the treatment (see the first-stage F)",
            "linear model with a constant effect of the treatment",
            se_words[self.se_type] + (", with small-sample corrections" if self.small else ""),
        ]

    def to_dict(self) -> dict:
        names = self.reported_names()
        out = {
            "n": self.n,
            "n_dropped": self.n_dropped,
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
            "weighted": self.weighted,
            "notes": list(self.notes),
            "assumptions": self.assumptions(),
            "caution": CAUTION,
        }
        if self.ar_set is not None:
            out["ar_set"] = intervals_to_lists(self.ar_set)
        return out

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

    @property
    def n(self) -> int:
        return self.moments.n


def prepare(moments: Moments, layout) -> Pieces:
    """Pass-1 algebra: design maps, checks, 2SLS, OLS and first-stage residual maps."""
    if moments.n == 0:
        raise InputError("no rows left after dropping rows with missing values; check the "
                         "columns' missing values")
    design = build_design(moments, layout.outcome, layout.treatments, layout.instruments,
                          layout.controls, layout.constant)
    k_params = max(design.regressors.shape[1], design.instrument_set.shape[1])
    check_rows(moments, k_params)
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
    return Pieces(moments, design, gram, tsls, ols, z_partialled, first_residuals)


def _overid_maps(pieces: Pieces) -> np.ndarray:
    """Row maps of the overidentifying instruments purged of ``[X̂, W]`` (Wooldridge's score test)."""
    d = pieces.design
    n_over = d.z.shape[1] - d.x.shape[1]
    q = d.z[:, :n_over]
    fitted = pieces.tsls.fitted
    coef = linalg.scaled_cholesky(fitted.T @ pieces.gram @ fitted).solve(
        fitted.T @ pieces.gram @ q)
    return q - fitted @ coef


def score_blocks(pieces: Pieces, se: str) -> list[ScoreBlock]:
    """The pass-2 requests a fit needs (none for classic covariances)."""
    if se == "classic":
        return []
    d = pieces.design
    blocks = [
        ScoreBlock("tsls", pieces.tsls.fitted, pieces.tsls.residual[:, None]),
        ScoreBlock("ols", d.regressors, pieces.ols.residual[:, None]),
        ScoreBlock("first", pieces.z_partialled, pieces.first_residuals),
    ]
    if d.z.shape[1] > d.x.shape[1]:
        blocks.append(ScoreBlock("overid", _overid_maps(pieces), pieces.tsls.residual[:, None]))
    return blocks


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


def _covariance(pieces: Pieces, fit: LinearFit, meat: np.ndarray | None, se: str, small: bool,
                n_clusters: int | None) -> np.ndarray:
    n = pieces.n
    k = fit.params.size
    sigma2 = None
    if se == "classic":
        sigma2 = float(fit.residual @ pieces.gram @ fit.residual) / n
    return sandwich(se, fit.bread, sigma2, meat, small_factor(se, small, n, k, n_clusters))


def first_stage_covariance(pieces: Pieces, meat: np.ndarray | None, se: str, small: bool,
                           n_clusters: int | None) -> np.ndarray:
    """Joint covariance of the excluded-instrument coefficients of every first-stage equation
    and of the reduced form, shape ``(k_e, k_z, k_e, k_z)`` with ``k_e = k_x + 1`` (the last
    equation is the reduced form of the outcome)."""
    zt = pieces.z_partialled
    bread = linalg.sym_inv_psd(zt.T @ pieces.gram @ zt)
    k_z = zt.shape[1]
    e = pieces.first_residuals
    k_e = e.shape[1]
    k_q = pieces.design.instrument_set.shape[1]
    factor = small_factor(se, small, pieces.n, k_q, n_clusters)
    if se == "classic":
        sigma = (e.T @ pieces.gram @ e) / pieces.n
        cov = np.einsum("ef,ab->eafb", sigma, bread)
    else:
        m = meat.reshape(k_z, k_e, k_z, k_e)
        cov = np.einsum("ab,becf,cd->eafd", bread, m, bread)
    return factor * cov


def _first_stages(pieces: Pieces, joint: np.ndarray, se: str, small: bool) -> tuple[
        tuple[FirstStage, ...], np.ndarray, np.ndarray]:
    d = pieces.design
    zt = pieces.z_partialled
    zz = zt.T @ pieces.gram @ zt
    targets = np.column_stack([d.x, d.y])
    coef = linalg.sym_inv_psd(zz) @ (zt.T @ pieces.gram @ targets)  # (k_z, k_e)
    k_z = zt.shape[1]
    k_q = d.instrument_set.shape[1]
    df2 = pieces.n - k_q if small else None
    # Treatment variation left after the controls, for the partial R².
    w = d.w
    if w.shape[1]:
        x_t = d.x - w @ linalg.scaled_cholesky(w.T @ pieces.gram @ w).solve(
            w.T @ pieces.gram @ d.x)
    else:
        x_t = d.x
    out = []
    for j, name in enumerate(d.treatments):
        pi = coef[:, j]
        v = joint[j, :, j, :]
        f = linalg.wald_statistic(pi, v) / k_z
        p = dist.f_sf(f, k_z, df2) if small else dist.chi2_sf(f * k_z, k_z)
        r2 = float(pi @ zz @ pi) / float(x_t[:, j] @ pieces.gram @ x_t[:, j])
        eff = None
        if len(d.treatments) == 1:
            eff = float(pi @ zz @ pi) / float(np.trace(v @ zz))
        out.append(FirstStage(name, dict(zip(d.instruments, map(float, pi))),
                              dict(zip(d.instruments, map(float, np.sqrt(np.diag(v))))),
                              float(f), (k_z, df2), p, r2, eff))
    return tuple(out), coef, zz


def anderson_rubin_set(pieces: Pieces, joint: np.ndarray, coef: np.ndarray, level: float,
                       small: bool) -> tuple[Interval, ...]:
    """Anderson–Rubin confidence set for one treatment, by inverting the AR test exactly."""
    k_z = coef.shape[0]
    pi, rho = coef[:, 0], coef[:, 1]
    if small:
        df2 = pieces.n - pieces.design.instrument_set.shape[1]
        critical = k_z * dist.f_quantile(level, k_z, df2)
    else:
        critical = dist.chi2_quantile(level, k_z)
    return linalg.quadratic_ratio_set(rho, pi, joint[1, :, 1, :], joint[1, :, 0, :],
                                      joint[0, :, 0, :], critical)


def _overid_test(pieces: Pieces, sums: ScoreSums | None, se: str) -> OverId | None:
    d = pieces.design
    df = d.z.shape[1] - d.x.shape[1]
    if df == 0:
        return None
    u = pieces.tsls.residual
    gram = pieces.gram
    if se == "classic":
        explained = pieces.tsls.instrument_chol.whiten(d.instrument_set.T @ gram @ u)
        stat = pieces.n * float(explained @ explained) / float(u @ gram @ u)
        name = "Sargan"
    else:
        q = _overid_maps(pieces)
        score = q.T @ gram @ u
        stat = linalg.wald_statistic(score, sums.meats["overid"])
        name = ("Wooldridge score (heteroskedasticity-robust)" if se == "robust"
                else "Wooldridge score (cluster-robust)")
    return OverId(name, float(stat), df, dist.chi2_sf(stat, df))


def fit_from_moments(pieces: Pieces, sums: ScoreSums | None, layout, *, se: str,
                     confidence_level: float, small: bool, weighted: bool) -> IVFit:
    """Assemble the fit and its diagnostics from pass-1 pieces and pass-2 sums."""
    n_clusters = sums.n_clusters if sums is not None else None
    meats = sums.meats if sums is not None else {}
    d = pieces.design
    tsls = _coefficients(d, pieces.tsls,
                         _covariance(pieces, pieces.tsls, meats.get("tsls"), se, small,
                                     n_clusters))
    ols = _coefficients(d, pieces.ols,
                        _covariance(pieces, pieces.ols, meats.get("ols"), se, small, n_clusters))
    joint = first_stage_covariance(pieces, meats.get("first"), se, small, n_clusters)
    stages, coef, _ = _first_stages(pieces, joint, se, small)
    ar = None
    if len(d.treatments) == 1:
        ar = anderson_rubin_set(pieces, joint, coef, confidence_level, small)
    notes = []
    for fs in stages:
        strength = fs.effective_f if fs.effective_f is not None else fs.f
        label = "effective first-stage F" if fs.effective_f is not None else "first-stage F"
        if not strength >= WEAK_F:
            message = (f"weak instrument: the {label} for '{fs.treatment}' is "
                       f"{format_number(strength, 3)} (< {WEAK_F:g}); 2SLS is biased towards "
                       "OLS and its Wald interval may be far too narrow; rely on the "
                       "Anderson-Rubin set")
            notes.append(message)
            warnings.warn(message, WeakInstrumentWarning, stacklevel=3)
    return IVFit(
        outcome=d.outcome, treatments=d.treatments, instruments=d.instruments,
        controls=tuple(layout.controls), constant=layout.constant, n=pieces.n,
        n_dropped=pieces.moments.n_dropped, n_clusters=n_clusters, se_type=se, small=small,
        confidence_level=confidence_level, weighted=weighted, tsls=tsls, ols=ols,
        first_stages=stages, ar_set=ar, overid=_overid_test(pieces, sums, se),
        notes=tuple(notes))


def check_options(se: str, cluster: str | None, confidence_level: float) -> None:
    """Validate the inference options (the caller's mistakes become :class:`InputError`)."""
    if se not in SE_TYPES:
        raise InputError(f"--se '{se}' is not a covariance type; choose one of "
                         f"{', '.join(SE_TYPES)}")
    if se == "cluster" and cluster is None:
        raise InputError("--se cluster needs a cluster variable: add --cluster COLUMN, or "
                         "choose --se robust")
    if not 0.0 < confidence_level < 1.0:
        raise InputError(f"--level {confidence_level} is outside (0, 1); give a confidence "
                         "level such as 0.95")


def normalise_weights(sums: ScoreSums, moments: Moments) -> ScoreSums:
    """Rescale score sums to weights normalised to mean one (no-op without weights)."""
    factor = (moments.n / moments.weight_sum) ** 2
    if factor == 1.0:
        return sums
    return ScoreSums({k: v * factor for k, v in sums.meats.items()}, sums.n_clusters)


def check_clusters(sums: ScoreSums | None, cluster: str | None) -> None:
    if sums is not None and sums.n_clusters is not None and sums.n_clusters < 2:
        raise InputError(f"cluster variable '{cluster}' has only {sums.n_clusters} group in the "
                         "rows used; cluster-robust inference needs many groups: choose --se "
                         "robust or another cluster variable")


def as_source(data, spec=None, *, chunk_rows: int | None = None):
    """A data-layer source from a source, a DataFrame or a path (with ``spec``)."""
    if hasattr(data, "chunks"):
        return data
    from sensiv.data import source as data_layer

    return data_layer.load(data, spec, chunk_rows=chunk_rows)


def default_se(spec) -> str:
    return "cluster" if spec.cluster else "robust"


def fit_with_pieces(source, *, se: str, confidence_level: float, small: bool,
                    extra_blocks=None) -> tuple[IVFit, Pieces, ScoreSums | None]:
    """Two passes over ``source``: the fit plus the pass-1 pieces and pass-2 sums.

    ``extra_blocks(pieces)`` may add score requests (for the sensitivity layers) to the same
    second pass, so the rows are read exactly twice whatever is computed.
    """
    spec = source.spec
    check_options(se, spec.cluster, confidence_level)
    layout = source.layout
    moments = accumulate(source.chunks(), layout.columns)
    pieces = prepare(moments, layout)
    blocks = score_blocks(pieces, se) + (list(extra_blocks(pieces)) if extra_blocks else [])
    sums = None
    if blocks:
        sums = normalise_weights(
            score_sums(source.chunks(), moments.mean, blocks, cluster=(se == "cluster")),
            moments)
        check_clusters(sums, spec.cluster)
    result = fit_from_moments(pieces, sums, layout, se=se, confidence_level=confidence_level,
                              small=small, weighted=spec.weight is not None)
    return result, pieces, sums


def fit(data, spec=None, *, se: SEType | None = None, confidence_level: float = 0.95,
        small: bool = False, chunk_rows: int | None = None) -> IVFit:
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

    Returns
    -------
    IVFit
    """
    source = as_source(data, spec, chunk_rows=chunk_rows)
    result, _, _ = fit_with_pieces(source, se=se or default_se(source.spec),
                                   confidence_level=confidence_level, small=small)
    return result
