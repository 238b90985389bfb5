"""Minimisers of the weak-IV-robust statistic over Γ, exact to rounding, and Γ's support
function — the pieces that :mod:`sensiv.sensitivity.robust_certified` evaluates.

A box uses bounded least squares (BVLS, exact); a polytope an interior-point quadratic
programme (cvxpy, compiled once with Parameters, at unit scale) whose answer is then polished to
the exact minimiser by the optimality conditions on its active constraints.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable

import numpy as np

from sensiv.estimation import linalg
from sensiv.partial_id.solver import solve
from sensiv.sensitivity.direct_sets import DirectSet

Minimiser = Callable[[np.ndarray, np.ndarray, float], tuple[float, np.ndarray]]


def make_minimiser(dset: DirectSet) -> Minimiser:
    """``(W, target, w) ↦ (min_{γ∈Γ} ‖target − w W γ‖², γ*)``: bounded least squares (BVLS)
    for a box, a quadratic programme (cvxpy Parameters, compiled once) for a polytope."""
    if dset.box is not None:
        from scipy.optimize import lsq_linear

        lows = np.array([b.low for b in dset.box])
        highs = np.array([b.high for b in dset.box])
        free = lows < highs

        def box_min(whiten, target, w):
            gamma = 0.5 * (lows + highs)
            if w == 0.0:
                return float(target @ target), gamma
            mat = w * whiten
            r0 = target - mat[:, ~free] @ lows[~free]
            if free.any():
                res = lsq_linear(mat[:, free], r0, bounds=(lows[free], highs[free]),
                                 method="bvls", tol=1e-14)
                gamma[free] = np.clip(res.x, lows[free], highs[free])
                r0 = r0 - mat[:, free] @ gamma[free]
            gamma[~free] = lows[~free]
            return float(r0 @ r0), gamma

        return box_min

    import cvxpy as cp

    # γ = centre + D η with D the half-widths of the bounding box: the programme works at unit
    # scale whatever the size of Γ (a tiny Γ is otherwise lost in the solver's tolerances)
    k = dset.constraints.shape[1]
    reference = dset.vertices.mean(axis=0)
    half = 0.5 * (dset.vertices.max(axis=0) - dset.vertices.min(axis=0))
    half = np.where(half > 0, half, 1.0)
    a_eta = dset.constraints * half[None, :]
    b_eta = dset.rhs - dset.constraints @ reference
    norms = np.maximum(np.abs(a_eta).max(axis=1), np.finfo(float).tiny)
    eta = cp.Variable(k)
    p_par = cp.Parameter((k, k))
    t_par = cp.Parameter(k)
    # ‖t − Pη‖² less its constant ‖t‖², divided by its scale: the part that varies over Γ is
    # of order one for the solver's tolerances
    problem = cp.Problem(cp.Minimize(cp.sum_squares(p_par @ eta) - 2.0 * t_par @ eta),
                         [(a_eta / norms[:, None]) @ eta <= b_eta / norms])

    def polytope_min(whiten, target, w):
        if w == 0.0:
            return float(target @ target), reference
        p_eta = (w * whiten) * half[None, :]
        t_eta = target - w * whiten @ reference
        linear = p_eta.T @ t_eta
        size = max(float(np.abs(linear).max()), float(np.abs(p_eta).max()) ** 2,
                   np.finfo(float).tiny)
        p_par.value, t_par.value = p_eta / math.sqrt(size), linear / size
        solve(problem, solver="CLARABEL", what="weak-IV-robust programme")
        e = polished(p_eta, t_eta, a_eta, b_eta, np.asarray(eta.value, float))
        g = reference + half * e
        r = target - w * whiten @ g
        return float(r @ r), g

    return polytope_min


def polished(p: np.ndarray, t: np.ndarray, a: np.ndarray, b: np.ndarray,
             approx: np.ndarray) -> np.ndarray:
    """The exact minimiser of ``‖t − Pγ‖²`` over ``Aγ ≤ b`` from the solver's ``approx``.

    Interior-point answers are accurate to about 1e-8 only, too coarse to settle the intervals
    beside a boundary.  The constraints nearly active at ``approx`` are taken as equalities
    (the KKT system of an equality-constrained least squares; when more than ``k`` are active
    or they are dependent, each independent subset in turn) and the first solution that is
    feasible with non-negative multipliers — the optimality conditions — is kept; else
    ``approx``.
    """
    k = p.shape[1]
    h, pt = p.T @ p, p.T @ t
    slack = b - a @ approx
    size = np.abs(b) + np.abs(a) @ np.abs(approx)
    near = np.flatnonzero(slack <= 1e-6 * (size + size.max()))
    near = near[np.argsort(slack[near])]
    subsets = [tuple(near)] if near.size <= k else []
    if near.size <= 12:
        subsets += [c for r in range(min(k, near.size), 0, -1)
                    for c in itertools.combinations(near, r)]
    subsets.append(())
    for rows in subsets:
        idx = list(rows)
        m = len(idx)
        kkt = np.block([[h, a[idx].T], [a[idx], np.zeros((m, m))]])
        try:
            sol = np.linalg.solve(kkt, np.concatenate([pt, b[idx]]))
        except np.linalg.LinAlgError:
            continue
        g, nu = sol[:k], sol[k:]
        tol = 1e-10 * (np.abs(b) + np.abs(a) @ np.abs(g)) + 1e-14 * size.max()
        if np.all(a @ g <= b + tol) and np.all(nu >= -1e-9 * (1.0 + np.abs(nu).max(
                initial=0.0))):
            return g
    return approx


def make_support(dset: DirectSet) -> Callable[[np.ndarray], float]:
    """``σ_Γ(λ) = max_{γ∈Γ} λ'γ`` in closed form (box) or over the vertices (polytope)."""
    if dset.box is not None:
        lows = np.array([b.low for b in dset.box])
        highs = np.array([b.high for b in dset.box])
        return lambda lam: float(np.maximum(lam * lows, lam * highs).sum())
    vertices = dset.vertices
    return lambda lam: float((vertices @ lam).max())


def whitening(v: np.ndarray) -> np.ndarray:
    """``W`` with ``W V W' = I`` (so ``W'W = V⁻¹``), from a column-scaled Cholesky factor."""
    chol = linalg.scaled_cholesky(v)
    # numpy's inverse of the small triangular factor: a threaded triangular solve with k
    # right-hand sides can cost 100x more on a busy machine, once per point
    return np.linalg.inv(chol.factor) / chol.scale[None, :]
