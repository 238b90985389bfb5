r"""The weak-instrument-robust sensitivity set: Anderson–Rubin inversion under a direct effect.

.. math::

    \{β_0 : \min_{γ∈Γ} (ρ - β_0π - γ)' V(β_0)^{-1} (ρ - β_0π - γ) \le χ^2\},

with ``ρ``, ``π`` the reduced-form and first-stage coefficients on the instruments
(:class:`ReducedForm`).  The set may be unbounded or a union of intervals, and is reported as
such: exactly with one instrument, certified by interval bounds with several
(:mod:`sensiv.sensitivity.robust_certified`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from sensiv.core.results import Interval
from sensiv.estimation import distributions as dist
from sensiv.estimation.first_stage import first_stage_covariance
from sensiv.estimation import iv, linalg
from sensiv.estimation.moments import ScoreSums
from sensiv.partial_id.solver import solve
from sensiv.sensitivity.direct_sets import DirectSet
from sensiv.sensitivity.robust_certified import certified_set
from sensiv.sensitivity.union import merge_intervals

# The weak-IV-robust set "differs materially" from the Wald union when their hulls differ by
# more than this share of the Wald union's width.
MATERIAL_SHARE = 0.25

# Grids of the earlier method :func:`grid_set` (kept for comparison, then refined by roots):
AR_GRID = 401               # box: bounded least squares per point
AR_GRID_POLYTOPE = 101      # polytope: one quadratic programme per point


@dataclass(frozen=True, slots=True)
class ReducedForm:
    """Reduced-form and first-stage coefficients on the instruments and their joint covariance
    (one treatment): ``rho`` for the outcome, ``pi`` for the treatment."""

    rho: np.ndarray
    pi: np.ndarray
    v_rr: np.ndarray
    v_rp: np.ndarray
    v_pp: np.ndarray
    critical: float


def reduced_form(pieces: iv.Pieces, sums: ScoreSums | None, result: iv.IVFit) -> ReducedForm:
    """Reduced form and first stage of one treatment on the instruments, with their joint
    covariance (the fit's kind) and the Anderson–Rubin critical value at the fit's level."""
    meats = sums.meats if sums is not None else {}
    n_clusters = sums.n_clusters if sums is not None else None
    joint = first_stage_covariance(pieces, meats.get("first"), result.se_type, result.small,
                                      n_clusters)
    d = pieces.design
    zt = pieces.z_partialled
    coef = linalg.sym_inv_psd(zt.T @ pieces.gram @ zt) @ (
        zt.T @ pieces.gram @ np.column_stack([d.x, d.y]))
    k_z = zt.shape[1]
    level = result.confidence_level
    if result.small:
        df2 = pieces.n - d.instrument_set.shape[1] - pieces.absorbed_parameters
        critical = k_z * dist.f_quantile(level, k_z, df2)
    else:
        critical = dist.chi2_quantile(level, k_z)
    e = coef.shape[1] - 1  # index of the outcome equation
    return ReducedForm(coef[:, e], coef[:, 0], joint[e, :, e, :], joint[e, :, 0, :],
                       joint[0, :, 0, :], critical)


def _ar_minimiser(rf: ReducedForm, dset: DirectSet):
    """``β₀ ↦ min_{γ∈Γ} (ρ − β₀π − γ)' V(β₀)⁻¹ (ρ − β₀π − γ)``.

    A box uses bounded least squares (BVLS, exact); a general polytope a quadratic programme
    built once with cvxpy Parameters and re-solved for each ``β₀``.
    """
    k = len(rf.rho)

    def whitened(beta0: float) -> tuple[np.ndarray, np.ndarray]:
        a = rf.rho - beta0 * rf.pi
        v = rf.v_rr - beta0 * (rf.v_rp + rf.v_rp.T) + beta0**2 * rf.v_pp
        chol = linalg.scaled_cholesky(v)
        # L⁻¹D⁻¹ (= chol.whiten(I)) by numpy's inverse: a threaded triangular solve with k
        # right-hand sides can cost 100x more on a busy machine, once per β₀
        whiten = np.linalg.inv(chol.factor) / chol.scale[None, :]
        return whiten, whiten @ a

    if dset.box is not None:
        from scipy.optimize import lsq_linear

        lows = np.array([b.low for b in dset.box])
        highs = np.array([b.high for b in dset.box])
        free = lows < highs

        def box_min(beta0: float) -> float:
            whiten, target = whitened(beta0)
            r0 = target - whiten[:, ~free] @ lows[~free]
            if not free.any():
                return float(r0 @ r0)
            res = lsq_linear(whiten[:, free], r0, bounds=(lows[free], highs[free]),
                             method="bvls", tol=1e-14)
            r = r0 - whiten[:, free] @ res.x
            return float(r @ r)

        return box_min

    import cvxpy as cp

    # Programme: minimise ‖t − P γ‖² over γ subject to A γ ≤ b, with P (whitening of V(β₀))
    # and t (whitened ρ − β₀π) as parameters, so the problem is compiled once.
    gamma = cp.Variable(k)
    p_par = cp.Parameter((k, k))
    t_par = cp.Parameter(k)
    problem = cp.Problem(cp.Minimize(cp.sum_squares(t_par - p_par @ gamma)),
                         [dset.constraints @ gamma <= dset.rhs])
    assert problem.is_dcp(dpp=True)

    def polytope_min(beta0: float) -> float:
        p_par.value, t_par.value = whitened(beta0)
        return solve(problem, solver="CLARABEL", what="weak-IV-robust programme").value

    return polytope_min


def robust_set(rf: ReducedForm, dset: DirectSet) -> tuple[tuple[Interval, ...], str]:
    """``{β₀ : min_{γ∈Γ} AR(β₀, γ) ≤ χ²}`` for one treatment; returns pieces and the method.

    One instrument, Γ = [l, h]: the set is exactly the union of the AR sets at ``γ = l`` and
    ``γ = h`` and of ``{β₀ : l ≤ ρ − β₀π ≤ h}`` (the minimum over γ is the squared distance of
    ``ρ − β₀π`` to ``[l, h]``).  Several instruments: certified by interval bounds and
    bisection over the whole line (:mod:`sensiv.sensitivity.robust_certified`), its middle
    chart on :func:`located_range`.
    """
    if len(rf.rho) == 1:
        lo, hi = dset.bounding_box[0].low, dset.bounding_box[0].high
        pieces = []
        for g in (lo, hi):
            pieces.extend(linalg.quadratic_ratio_set(rf.rho - g, rf.pi, rf.v_rr, rf.v_rp,
                                                     rf.v_pp, rf.critical))
        pi, rho = float(rf.pi[0]), float(rf.rho[0])
        if pi != 0.0:
            ends = sorted(((rho - hi) / pi, (rho - lo) / pi))
            pieces.append(Interval(ends[0], ends[1]))
        elif lo <= rho <= hi:
            pieces.append(Interval(-math.inf, math.inf))
        return merge_intervals(pieces), "exact"
    lo, hi = located_range(rf, dset)
    return certified_set(rf.rho, rf.pi, rf.v_rr, rf.v_rp, rf.v_pp, rf.critical, dset,
                         centre=0.5 * (lo + hi), radius=0.5 * (hi - lo))


def locating_points(dset: DirectSet) -> np.ndarray:
    """Points of Γ whose exact AR sets locate the robust set: the vertices, or — for a box whose
    corners are not stored — its centre and the centres of its ``2k`` faces."""
    if dset.vertices is not None:
        return dset.vertices
    lows = np.array([b.low for b in dset.box])
    highs = np.array([b.high for b in dset.box])
    centre = 0.5 * (lows + highs)
    rows = [centre]
    for j in range(len(lows)):
        for end in (lows[j], highs[j]):
            row = centre.copy()
            row[j] = end
            rows.append(row)
    return np.array(rows)


def located_range(rf: ReducedForm, dset: DirectSet) -> tuple[float, float]:
    """Where the set's bounded pieces are expected: the hull of the finite ends of the exact
    AR sets at :func:`locating_points` and of ``ρ'π/π'π``, widened by twice its width on each
    side (a guide for the search only: the certified method covers the whole line)."""
    vertex_pieces = []
    for v in locating_points(dset):
        vertex_pieces.extend(linalg.quadratic_ratio_set(rf.rho - v, rf.pi, rf.v_rr, rf.v_rp,
                                                        rf.v_pp, rf.critical))
    finite = [e for p in vertex_pieces for e in (p.low, p.high) if math.isfinite(e)]
    center = float(rf.rho @ rf.pi / (rf.pi @ rf.pi))
    finite.append(center)
    lo, hi = min(finite), max(finite)
    width = max(hi - lo, 1e-8 * max(1.0, abs(center)))
    return lo - 2 * width, hi + 2 * width


def grid_set(rf: ReducedForm, dset: DirectSet) -> tuple[Interval, ...]:
    """The earlier method, kept for comparison (tests and benchmarks), not used by any
    analysis: ``g`` on a grid of :data:`AR_GRID` (box) or :data:`AR_GRID_POLYTOPE` points over
    :func:`located_range` (widened until both ends are outside when the set is bounded), sign
    changes refined by ``brentq``.  A piece narrower than the grid step can be missed."""
    from scipy.optimize import brentq

    minimum = _ar_minimiser(rf, dset)

    def g(b: float) -> float:
        return minimum(b) - rf.critical

    # the set is unbounded exactly when the first-stage Wald statistic π'V_ππ⁻¹π is at most
    # the critical value (the limit of the minimised statistic as |β₀| → ∞)
    unbounded = linalg.wald_statistic(rf.pi, rf.v_pp) <= rf.critical
    lo, hi = located_range(rf, dset)
    while not unbounded and (g(lo) <= 0 or g(hi) <= 0):
        lo, hi = lo - 2 * (hi - lo), hi + 2 * (hi - lo)
    grid = np.linspace(lo, hi, AR_GRID if dset.box is not None else AR_GRID_POLYTOPE)
    values = np.array([g(b) for b in grid])
    inside = values <= 0
    edges = []
    for i in range(len(grid) - 1):
        if inside[i] != inside[i + 1]:
            edges.append(brentq(g, grid[i], grid[i + 1], xtol=1e-14 * max(1.0, abs(grid[i]))))
    pieces = []
    start = -math.inf if (inside[0] and unbounded) else None
    if inside[0] and not unbounded:
        start = grid[0]
    it = iter(edges)
    for i in range(len(grid) - 1):
        if inside[i] != inside[i + 1]:
            e = next(it)
            if inside[i + 1]:
                start = e
            else:
                pieces.append(Interval(start, e))
                start = None
    if start is not None:
        pieces.append(Interval(start, math.inf if unbounded else grid[-1]))
    return merge_intervals(pieces)


def differs_materially(ar: tuple[Interval, ...], wald: Interval) -> bool:
    """True when the hull of the weak-IV-robust set ``ar`` is empty, unbounded, or differs in
    width from the Wald union by more than :data:`MATERIAL_SHARE` of the union's width."""
    hull = (Interval(ar[0].low, ar[-1].high) if ar else None)
    return hull is None or not hull.bounded or abs(
        hull.width - wald.width) > MATERIAL_SHARE * wald.width
