r"""Covariances of 2SLS and OLS coefficients: the score requests of pass 2, the sandwich and its
finite-sample factor.

.. math::

    V_{\text{classic}} = c\,\hat σ^2 B, \qquad V_{\text{robust, cluster}} = c\,B\,Ω\,B,
    \qquad B = (\hat X'\hat X)^{-1},

with ``Ω`` the meat summed in pass 2 (:func:`sensiv.estimation.moments.score_sums`) from the
row maps that :func:`score_blocks` requests, and ``c`` from :func:`small_factor`.  Conventions:
classic ``σ̂² = Σ wᵢûᵢ² / n``; robust is HC0; cluster sums scores within one-way groups.

Functions that take ``pieces`` read the pass-1 algebra of :class:`sensiv.estimation.iv.Pieces`
(``design``, ``gram``, ``tsls``, ``ols``, ``z_partialled``, ``first_residuals``).
"""

from __future__ import annotations

import numpy as np

from sensiv.core.errors import InputError
from sensiv.estimation import linalg
from sensiv.estimation.least_squares import LinearFit
from sensiv.estimation.moments import Moments, ScoreBlock, ScoreSums


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


def coefficient_covariance(fit: LinearFit, gram: np.ndarray, n: int, meat: np.ndarray | None,
                           se: str, small: bool, n_clusters: int | None,
                           absorbed: int = 0) -> np.ndarray:
    """Covariance of a solve's parameters in solving coordinates.

    ``gram`` is the weighted Gram matrix of the augmented rows (weights of mean one) and
    ``meat`` the pass-2 sum of the solve's scores (``None`` for classic covariances);
    ``absorbed`` counts absorbed fixed-effect levels among the parameters.
    """
    k = fit.params.size + absorbed
    sigma2 = None
    if se == "classic":
        sigma2 = float(fit.residual @ gram @ fit.residual) / n
    return sandwich(se, fit.bread, sigma2, meat, small_factor(se, small, n, k, n_clusters))


def overid_maps(pieces) -> np.ndarray:
    """Row maps of the overidentifying instruments purged of ``[X̂, W]`` (Wooldridge's score test)."""
    d = pieces.design
    n_over = d.z.shape[1] - d.x.shape[1]
    q = d.z[:, :n_over]
    fitted = pieces.tsls.fitted
    coef = linalg.scaled_cholesky(fitted.T @ pieces.gram @ fitted).solve(
        fitted.T @ pieces.gram @ q)
    return q - fitted @ coef


def score_blocks(pieces, se: str) -> list[ScoreBlock]:
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
        blocks.append(ScoreBlock("overid", overid_maps(pieces), pieces.tsls.residual[:, None]))
    return blocks


def normalise_weights(sums: ScoreSums, moments: Moments) -> ScoreSums:
    """Rescale score sums to weights normalised to mean one (no-op without weights)."""
    factor = (moments.n / moments.weight_sum) ** 2
    if factor == 1.0:
        return sums
    return ScoreSums({k: v * factor for k, v in sums.meats.items()}, sums.n_clusters)


def check_clusters(sums: ScoreSums | None, cluster: str | None) -> None:
    """Raise :class:`InputError` when a cluster covariance would rest on fewer than 2 groups."""
    if sums is not None and sums.n_clusters is not None and sums.n_clusters < 2:
        raise InputError(f"cluster variable '{cluster}' has only {sums.n_clusters} group in the "
                         "rows used; cluster-robust inference needs many groups: choose --se "
                         "robust or another cluster variable")


FEW_CLUSTERS = 30
"""Clusters below which cluster-robust intervals are flagged: a rule of thumb (common
practice, no source)."""


def few_clusters_note(n_clusters: int | None) -> str | None:
    """The warning text when there are fewer than :data:`FEW_CLUSTERS` clusters, else ``None``."""
    if n_clusters is None or n_clusters >= FEW_CLUSTERS:
        return None
    return (f"few clusters: the cluster variable has only {n_clusters} groups (< "
            f"{FEW_CLUSTERS}); cluster-robust standard errors are then biased downwards and "
            "the intervals may under-cover: read them with care (e.g. compare with a "
            "wild-cluster bootstrap)")

