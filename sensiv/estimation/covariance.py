r"""Covariances of 2SLS and OLS coefficients: the score requests of pass 2, the sandwich and its
finite-sample factor.

.. math::

    V_{\text{classic}} = c\,\hat σ^2 B, \qquad V_{\text{robust, cluster}} = c\,B\,Ω\,B,
    \qquad B = (\hat X'\hat X)^{-1},

with ``Ω`` the meat summed in pass 2 (:func:`sensiv.estimation.moments.score_sums`) from the
row maps that :func:`score_blocks` requests, and ``c`` from :func:`small_factor`.  Conventions:
classic ``σ̂² = Σ wᵢûᵢ² / n``; robust is HC0; cluster sums scores within one-way groups, or
two ways (Cameron, Gelbach & Miller 2011: ``Ω = Ω_A + Ω_B − Ω_{A∩B}``, see
:func:`combine_two_way`).

Functions that take ``pieces`` read the pass-1 algebra of :class:`sensiv.estimation.iv.Pieces`
(``design``, ``gram``, ``tsls``, ``ols``, ``z_partialled``, ``first_residuals``).
"""

from __future__ import annotations

import dataclasses

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
    parts = tuple((sign, {k: v * factor for k, v in part.items()}, groups)
                  for sign, part, groups in sums.parts)
    return dataclasses.replace(sums, meats={k: v * factor for k, v in sums.meats.items()},
                               parts=parts)


def combine_two_way(sums: ScoreSums, small: bool) -> ScoreSums:
    r"""Two-way meats with each term's own small-sample factor, repaired to be PSD.

    Convention (Cameron, Gelbach & Miller 2011, eq. 2.13 with each term's own
    ``G/(G−1)``): ``V = c_A V_A + c_B V_B − c_{A∩B} V_{A∩B}`` with ``c = G/(G−1)·(n−1)/(n−k)``
    under ``small`` (1 without).  The common ``(n−1)/(n−k)`` and ``c_min = G/(G−1)`` of the
    smaller of ``G_A, G_B`` stay in :func:`small_factor` (``sums.n_clusters`` is that ``G``),
    so here each one-way meat is scaled by ``(G/(G−1)) / c_min``.

    Repair: the combined meat of each block is the joint covariance of that block's score
    vector; its negative eigenvalues are clipped to zero (the eigenvalue fix of CGM 2011,
    section 2.3, applied to the meat rather than to ``V``).  Every covariance built from a
    block, ``B Ω B`` or the sweep's ``[1, −γ'] Ω [1, −γ']'``, is then PSD and the variance
    of ``β̂(γ)`` stays an exact quadratic in ``γ``.  Blocks are repaired separately, so when
    a repair was needed the sweep's variance at ``γ = 0`` can differ slightly from the fit's;
    ``psd_fix`` records it.  One-way sums are returned unchanged.
    """
    if not sums.parts:
        return sums
    g_min = sums.n_clusters
    meats, fixed = {}, False
    for name in sums.meats:
        total = 0.0
        for sign, part, groups in sums.parts:
            scale = (groups / (groups - 1)) / (g_min / (g_min - 1)) if small and groups > 1 else 1.0
            total = total + sign * scale * part[name]
        meats[name], clipped = clip_negative_eigenvalues(total)
        fixed = fixed or clipped
    return dataclasses.replace(sums, meats=meats, psd_fix=fixed)


def clip_negative_eigenvalues(matrix: np.ndarray) -> tuple[np.ndarray, bool]:
    """``matrix`` with negative eigenvalues set to zero, and whether any was clipped.

    Eigenvalues above ``−1e-12·max|λ|`` count as rounding (not clipped)."""
    sym = 0.5 * (matrix + matrix.T)
    values, vectors = np.linalg.eigh(sym)
    tol = 1e-12 * max(float(np.max(np.abs(values))), np.finfo(float).tiny)
    if values.size == 0 or values.min() >= -tol:
        return sym, False
    clipped = (vectors * np.maximum(values, 0.0)) @ vectors.T
    return 0.5 * (clipped + clipped.T), True


def check_clusters(sums: ScoreSums | None, cluster) -> None:
    """Raise :class:`InputError` when a cluster covariance would rest on fewer than 2 groups."""
    if sums is None or sums.n_clusters is None:
        return
    names = (cluster,) if isinstance(cluster, str) or cluster is None else tuple(cluster)
    counts = sums.cluster_counts[:2] if sums.cluster_counts else (sums.n_clusters,)
    for name, count in zip(names, counts):
        if count < 2:
            raise InputError(f"cluster variable '{name}' has only {count} group in the "
                             "rows used; cluster-robust inference needs many groups: choose "
                             "--se robust or another cluster variable")


FEW_CLUSTERS = 30
"""Clusters below which cluster-robust intervals are flagged: a rule of thumb (common
practice, no source)."""


def few_clusters_note(n_clusters: int | None, name: str | None = None) -> str | None:
    """The warning text when there are fewer than :data:`FEW_CLUSTERS` clusters, else ``None``.

    ``name`` (the cluster column) is named in the text when given."""
    if n_clusters is None or n_clusters >= FEW_CLUSTERS:
        return None
    variable = f"the cluster variable '{name}'" if name else "the cluster variable"
    return (f"few clusters: {variable} has only {n_clusters} groups (< "
            f"{FEW_CLUSTERS}); cluster-robust standard errors are then biased downwards and "
            "the intervals may under-cover: read them with care (e.g. compare with a "
            "wild-cluster bootstrap)")


def few_clusters_notes(sums: ScoreSums | None, cluster) -> list[str]:
    """One few-clusters note per cluster variable (two for two-way clustering)."""
    if sums is None or sums.n_clusters is None:
        return []
    return count_notes(sums.cluster_counts[:2] or (sums.n_clusters,), cluster)


def count_notes(counts: tuple[int, ...], cluster) -> list[str]:
    """Few-clusters notes from the group counts of the cluster variable(s) ``cluster``.

    One-way notes keep the generic wording; two-way notes name each variable."""
    if len(counts) == 1:
        note = few_clusters_note(counts[0])
        return [note] if note else []
    notes = [few_clusters_note(count, name) for name, count in zip(tuple(cluster), counts)]
    return [note for note in notes if note]


def psd_fix_note(sums: ScoreSums | None) -> str | None:
    """The note saying the two-way eigenvalue fix was needed, else ``None``."""
    if sums is None or not sums.psd_fix:
        return None
    return ("two-way clustering: the combined covariance V_A + V_B - V_(A and B) was not "
            "positive semi-definite; its negative eigenvalues were set to zero (Cameron, "
            "Gelbach & Miller 2011), which can only enlarge the standard errors")


def two_way_keys(result) -> dict:
    """JSON keys of two-way clustering (none for one-way): ``clusters``, per-variable
    ``n_clusters`` under ``cluster_counts`` and ``psd_fix``."""
    if not result.cluster_counts:
        return {}
    names = list(result.cluster)
    return {"clusters": names, "cluster_counts": dict(zip(names, result.cluster_counts[:2])),
            "n_intersections": result.cluster_counts[2], "psd_fix": result.psd_fix}
