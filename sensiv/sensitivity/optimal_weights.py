r"""Bias-aware interval of the optimally weighted estimator (Armstrong & Kolesár 2021,
"Sensitivity analysis using approximate moment condition models", Quantitative Economics).

Estimators.  With the controls partialled out (``Z̃`` the instruments' residual maps), every
estimator of the focus coefficient that is linear in the instruments' moment conditions
``E[Z̃ (y − Xβ − Zγ)] = 0`` and exact when ``γ = γ_c`` is

.. math::

    b_w = w'\tilde Z'(y - Zγ_c) \quad\text{with}\quad w'\tilde Z'X = e_j',

(``e_j`` picks the focus treatment; the constraint makes ``b_w`` unbiased for β when the
moments hold).  2SLS is ``w = S⁻¹G(G'S⁻¹G)⁻¹e_j`` with ``S = Z̃'Z̃`` and ``G = Z̃'X``; with as
many instruments as treatments the constraint leaves one ``w``, so both coincide.  For a true
``γ`` the bias of ``b_w`` is ``−w'D(γ − γ_c)`` (``D = Z̃'Z``), linear in ``γ`` like that of
2SLS, and its influence is the row map ``Z̃w``: so ``b_w`` is a
:class:`~sensiv.sensitivity.linear_core.Core` with slope ``D'w`` and the variance quadratic
``q_w(γ) = (w⊗I)' M (w⊗I)`` of the pass-2 block :func:`moment_block` (scores ``Z̃ ⊗ [û, M]``
with the 2SLS residual ``u(γ) = û − Mγ``, which is consistent under every ``γ``).  Its
bias-aware interval is then computed exactly as the 2SLS one
(:func:`~sensiv.sensitivity.bias_aware.bias_aware`: the worst-case bias over Γ, the largest
standard error over Γ, ``cv_α``).

The paper's optimality criterion is the length of that interval, ``2·cv_α(B(w)/s(w))·s(w)``,
minimised over the weights (their Section 4: the optimal sensitivity for the fixed-length
interval).  For a fixed bias bound the length increases in the standard deviation, so the
optimum lies on the frontier ``min_w Var(b_w) s.t. B(w) ≤ t``, which we trace through its
Lagrangian form

.. math::

    \min_{w,\,t}\; w'Ω_c w + λ t^2 \quad\text{s.t.}\quad B(w) ≤ t,\; w'G = e_j',

a second-order cone programme (cvxpy, Clarabel, status-checked by
:func:`sensiv.partial_id.solver.solve`) with ``λ`` a cvxpy ``Parameter`` run over a geometric
grid (scaled by the variance and bias of the efficient weights at ``λ = 0``) and ``Ω_c`` the
moments' covariance at the centre.  ``B(w) = Σ_i h_i |(D'w)_i|`` for a box of half-widths
``h``, ``max_v |w'D(v − γ_c)|`` over the vertices of a polytope.  Every traced ``w`` (and the
2SLS weights) is scored by its actual bias-aware length (largest standard error over Γ) and
the shortest is kept: the reported interval is never longer than the 2SLS-centred one, and
the trace is this module's own formulation of the paper's criterion, not the paper's
algorithm.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from sensiv.core.errors import SolverError
from sensiv.core.results import json_number
from sensiv.estimation import iv, linalg
from sensiv.estimation.covariance import small_factor
from sensiv.estimation.moments import ScoreBlock, ScoreSums
from sensiv.estimation.score_basis import in_basis
from sensiv.partial_id.solver import solve
from sensiv.sensitivity.bias_aware import BiasAware, Centre, bias_aware, set_centre
from sensiv.sensitivity.direct_sets import DirectSet
from sensiv.sensitivity.linear_core import Core, residual_maps

WEIGHTING = "optimal"
SOLVER = "CLARABEL"
MAX_INSTRUMENTS = 20        # the pass-2 block has (k_z (1 + k_z))² entries
TRADE_OFFS = np.geomspace(1e-3, 1e3, 21)   # λ relative to Var/B² of the efficient weights
METHOD = ("weights minimising the bias-aware length over a traced variance-bias trade-off "
          "(second-order cone programmes, cvxpy)")
JUST_IDENTIFIED = "just identified: the 2SLS weights are the only ones"
BLOCK = "moments"


@dataclass(frozen=True, slots=True)
class OptimalBiasAware:
    """The optimally weighted bias-aware interval, its weights and its length relative to the
    2SLS-centred interval (``length_ratio`` ≤ 1; ``None`` when that one is unbounded)."""

    interval: BiasAware
    weights: tuple[float, ...]
    instruments: tuple[str, ...]
    length_ratio: float | None
    trade_off: float | None       # the λ picked (None: the 2SLS weights were the shortest)
    traced: bool = True           # False when just identified (then it is the 2SLS interval)

    def to_dict(self) -> dict:
        return self.interval.to_dict() | {
            "weighting": WEIGHTING, "length_ratio": json_number(self.length_ratio),
            "weights": dict(zip(self.instruments, self.weights)),
            "trade_off": json_number(self.trade_off),
            "method": METHOD if self.traced else JUST_IDENTIFIED}

    def assumptions(self) -> list[str]:
        return ["the optimally weighted estimator uses fixed weights on the instruments' "
                "moment conditions, chosen to shorten the bias-aware interval under the stated "
                "set; its guarantee is that of the 2SLS-centred interval"]


def wanted(pieces: iv.Pieces, se: str) -> bool:
    """True when the weights are traced: overidentified, at most MAX_INSTRUMENTS."""
    k_z, k_x = pieces.design.z.shape[1], pieces.design.x.shape[1]
    return k_x < k_z <= MAX_INSTRUMENTS


def moment_block(pieces: iv.Pieces, se: str) -> list[ScoreBlock]:
    """The pass-2 request (scores ``Z̃ ⊗ [û, M]``), empty when not :func:`wanted` or classic."""
    if se == "classic" or not wanted(pieces, se):
        return []
    maps = residual_maps(pieces)
    return [in_basis(ScoreBlock(BLOCK, pieces.z_partialled, maps), moment_span(pieces, maps),
                     pieces.gram)]


def moment_span(pieces: iv.Pieces, maps: np.ndarray) -> np.ndarray:
    """``[Z̃, X̃, û]``, whose span over the rows holds both maps of :func:`moment_block`.

    The controls ``W`` are among the instruments and the regressors, so ``W'u(γ) = 0`` for
    every 2SLS residual ``u(γ) = û − Mγ`` (the normal equations), hence
    ``u(γ) = ỹ − X̃β(γ) − Z̃γ`` row by row (``~``: controls partialled out) and ``ỹ = û + X̃β̂``.
    The pass-2 kernels then sum ``(k_z + k_x + 1)(k_z + k_x + 2)/2`` distinct products per row
    instead of ``k_z (1 + k_z)`` scores (:mod:`sensiv.estimation.symmetric_rows`)."""
    d, gram = pieces.design, pieces.gram
    x = d.x
    if d.w.shape[1]:
        x = x - d.w @ linalg.scaled_cholesky(d.w.T @ gram @ d.w).solve(d.w.T @ gram @ d.x)
    return np.column_stack([pieces.z_partialled, x, maps[:, :1]])


@dataclass(frozen=True, slots=True)
class WeightPieces:
    """``S = Z̃'Z̃``, ``G = Z̃'X``, ``D = Z̃'Z``, ``r = Z̃'y`` and the variance pieces."""

    s: np.ndarray
    g: np.ndarray
    d: np.ndarray
    r: np.ndarray
    meat: np.ndarray | None     # robust / cluster: the block's sums (with the factor)
    classic: np.ndarray | None  # classic: maps' gram maps / n (with the factor)


def moment_pieces(pieces: iv.Pieces, sums: ScoreSums | None, result: iv.IVFit) -> WeightPieces:
    d = pieces.design
    zp, gram = pieces.z_partialled, pieces.gram
    k = pieces.tsls.params.size + pieces.absorbed_parameters
    n_clusters = sums.n_clusters if sums is not None else None
    factor = small_factor(result.se_type, result.small, pieces.n, k, n_clusters)
    maps = residual_maps(pieces)
    meat = classic = None
    if result.se_type == "classic":
        classic = factor * (maps.T @ gram @ maps) / pieces.n
    else:
        meat = factor * sums.meats[BLOCK]
    return WeightPieces(zp.T @ gram @ zp, zp.T @ gram @ d.x, zp.T @ gram @ d.z,
                    zp.T @ gram @ d.y, meat, classic)


def weighted_core(m: WeightPieces, w: np.ndarray, template: Core) -> Core:
    """The :class:`Core` of ``b_w``: estimate ``w'r``, slope ``D'w``, quadratic ``q_w``."""
    w = np.asarray(w, float)
    if m.classic is not None:
        quad = float(w @ m.s @ w) * m.classic
    else:
        kron = np.kron(w[:, None], np.eye(m.d.shape[1] + 1))
        quad = kron.T @ m.meat @ kron
    return Core(template.focus, template.instruments, float(w @ m.r), m.d.T @ w,
                0.5 * (quad + quad.T), template.critical)


def tsls_weights(m: WeightPieces, j: int) -> np.ndarray:
    """``S⁻¹G(G'S⁻¹G)⁻¹e_j``."""
    sg = np.linalg.solve(m.s, m.g)
    return sg @ np.linalg.solve(m.g.T @ sg, np.eye(m.g.shape[1])[:, j])


def centre_covariance(m: WeightPieces, centre: np.ndarray) -> np.ndarray:
    """``Ω_c``: the moments' covariance at the centre, ``(I⊗c)' M (I⊗c)``, ``c = [1, −γ_c]``."""
    c = np.concatenate([[1.0], -np.asarray(centre, float)])
    if m.classic is not None:
        return m.s * float(c @ m.classic @ c)
    kron = np.kron(np.eye(m.s.shape[0]), c[:, None])
    return kron.T @ m.meat @ kron


def trade_off_path(m: WeightPieces, dset: DirectSet, centre: Centre,
                   j: int, scale: float = 1.0) -> list[tuple[float, np.ndarray]]:
    """``(λ, w)`` along the variance-bias trade-off over ``scale·Γ`` (the failed solves left
    out; the scaled set has centre ``scale·γ_c`` and ``scale`` times the bias)."""
    import cvxpy as cp

    omega = centre_covariance(m, scale * centre.point)
    vals, vecs = np.linalg.eigh(0.5 * (omega + omega.T))
    root = vecs * np.sqrt(np.clip(vals, 0.0, None))
    w = cp.Variable(m.s.shape[0])
    t = cp.Variable(nonneg=True)
    lam = cp.Parameter(nonneg=True)
    slope = m.d.T @ w
    if centre.half_widths is not None:
        bias = (scale * centre.half_widths) @ cp.abs(slope)
    else:
        bias = cp.max(cp.abs(scale * (np.asarray(dset.vertices) - centre.point) @ slope))
    problem = cp.Problem(cp.Minimize(cp.sum_squares(root.T @ w) + lam * cp.square(t)),
                         [bias <= t, m.g.T @ w == np.eye(m.g.shape[1])[:, j]])
    out = []
    lam.value = 0.0
    try:
        sol = solve(problem, solver=SOLVER, what="optimal-weighting programme")
    except SolverError:
        return out
    if sol.outcome != "optimal":
        return out
    w0 = np.asarray(w.value, float).copy()
    out.append((0.0, w0))
    var0 = float(w0 @ omega @ w0)
    bias0 = float(t.value)
    unit = var0 / bias0 ** 2 if bias0 > 0.0 and var0 > 0.0 else 1.0
    for rel in TRADE_OFFS:
        lam.value = float(rel * unit)
        try:
            sol = solve(problem, solver=SOLVER, what="optimal-weighting programme")
        except SolverError:
            continue
        if sol.outcome == "optimal" and w.value is not None:
            out.append((float(lam.value), np.asarray(w.value, float).copy()))
    return out


def optimal_bias_aware(m: WeightPieces, template: Core, dset: DirectSet, j: int,
                       confidence_level: float, reference: BiasAware, *,
                       unbounded: bool = False, scale: float = 1.0) -> OptimalBiasAware:
    """The shortest bias-aware interval over ``scale·Γ`` among the weights traced for that
    set and the 2SLS weights (``reference``: the 2SLS-centred interval over the same set)."""
    centre = set_centre(dset)
    w_2sls = tsls_weights(m, j)
    best = (reference.ci.width if reference.ci.bounded else math.inf, None, w_2sls, reference)
    for lam, w in trade_off_path(m, dset, centre, j, scale):
        ba = bias_aware([weighted_core(m, w, template)], dset, confidence_level,
                        centre=centre, scale=scale)
        if ba.ci.bounded and ba.ci.width < best[0]:
            best = (ba.ci.width, lam, w, ba)
    width, lam, w, ba = best
    if unbounded:
        ba = replace(ba, ci=reference.ci)
    ratio = (width / reference.ci.width
             if reference.ci.bounded and reference.ci.width > 0.0 and not unbounded else None)
    return OptimalBiasAware(replace(ba, weighting=WEIGHTING), tuple(map(float, w)),
                            template.instruments, ratio, lam)


def optimal_from_fit(pieces: iv.Pieces, sums: ScoreSums | None, result: iv.IVFit, j: int,
                     core: Core, dset: DirectSet, reference: BiasAware, *,
                     unbounded: bool = False) -> OptimalBiasAware | None:
    """:func:`optimal_bias_aware` from a fit's pieces (the 2SLS-centred interval itself when
    just identified); ``None`` beyond MAX_INSTRUMENTS (or without the pass-2 block)."""
    k_z, k_x = pieces.design.z.shape[1], pieces.design.x.shape[1]
    if k_z == k_x:       # the constraint w'G = e_j leaves the 2SLS weights alone
        zp, gram = pieces.z_partialled, pieces.gram
        w = np.linalg.solve((zp.T @ gram @ pieces.design.x).T, np.eye(k_x)[:, j])
        ratio = 1.0 if reference.ci.bounded and not unbounded else None
        return OptimalBiasAware(replace(reference, weighting=WEIGHTING), tuple(map(float, w)),
                                core.instruments, ratio, None, traced=False)
    if not wanted(pieces, result.se_type):
        return None
    if result.se_type != "classic" and (sums is None or BLOCK not in sums.meats):
        return None
    m = moment_pieces(pieces, sums, result)
    return optimal_bias_aware(m, core, dset, j, result.confidence_level, reference,
                              unbounded=unbounded)
