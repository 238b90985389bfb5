r"""The first stage of 2SLS: the excluded-instrument coefficients of every treatment (and of
the outcome's reduced form), their joint covariance, and per treatment the first-stage F, its
p-value, the partial R² and, with one treatment, the effective F (Montiel Olea & Pflueger
2013),

.. math::

    F_{\text{eff}} = \frac{\hat π' \tilde Z'\tilde Z\, \hat π}
                          {\operatorname{tr}(V_{π}\, \tilde Z'\tilde Z)}.

Functions that take ``pieces`` read the pass-1 algebra of :class:`sensiv.estimation.iv.Pieces`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sensiv.core.results import json_number
from sensiv.estimation import distributions as dist
from sensiv.estimation import linalg
from sensiv.estimation.covariance import small_factor


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


def first_stage_covariance(pieces, meat: np.ndarray | None, se: str, small: bool,
                           n_clusters: int | None) -> np.ndarray:
    """Joint covariance of the excluded-instrument coefficients of every first-stage equation
    and of the reduced form, shape ``(k_e, k_z, k_e, k_z)`` with ``k_e = k_x + 1`` (the last
    equation is the reduced form of the outcome)."""
    zt = pieces.z_partialled
    bread = linalg.sym_inv_psd(zt.T @ pieces.gram @ zt)
    k_z = zt.shape[1]
    e = pieces.first_residuals
    k_e = e.shape[1]
    k_q = pieces.design.instrument_set.shape[1] + pieces.absorbed_parameters
    factor = small_factor(se, small, pieces.n, k_q, n_clusters)
    if se == "classic":
        sigma = (e.T @ pieces.gram @ e) / pieces.n
        cov = np.einsum("ef,ab->eafb", sigma, bread)
    else:
        m = meat.reshape(k_z, k_e, k_z, k_e)
        cov = np.einsum("ab,becf,cd->eafd", bread, m, bread)
    return factor * cov


def first_stages(pieces, joint: np.ndarray, se: str, small: bool) -> tuple[
        tuple[FirstStage, ...], np.ndarray, np.ndarray]:
    """One :class:`FirstStage` per treatment, with the coefficients ``(k_z, k_x + 1)`` of the
    excluded instruments (last column: the reduced form) and their Gram matrix ``Z̃'Z̃``.

    ``joint`` is :func:`first_stage_covariance` of the same fit.
    """
    d = pieces.design
    zt = pieces.z_partialled
    zz = zt.T @ pieces.gram @ zt
    targets = np.column_stack([d.x, d.y])
    coef = linalg.sym_inv_psd(zz) @ (zt.T @ pieces.gram @ targets)  # (k_z, k_e)
    k_z = zt.shape[1]
    k_q = d.instrument_set.shape[1] + pieces.absorbed_parameters
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
