r"""The cvxpy bound programmes of the correlation restriction, and the set algebra on them.

For ``K`` instruments and a sign ``s`` of ``corr(X, u)`` the ends of the identified set are
two linear programmes in the standardised coefficient ``b`` (the constraints are those of
:func:`sensiv.partial_id.correlation_moments.constraint_rows`); the smallest ratio that the data
allow is a third, linear-fractional one.  :class:`Programmes` builds the three once per ``K``
(DPP: the partial correlations and the ratio are parameters) and re-solves them by setting
values; :func:`compiled_programmes` caches one per ``K``.  :func:`breakdown_ratio` is exact
in closed form, and :func:`union` merges the pieces of the two signs.
"""

from __future__ import annotations

import functools
import math
import warnings
from collections.abc import Sequence

import numpy as np

from sensiv.core.errors import InaccurateSolveWarning, SolverError
from sensiv.core.results import Interval
from sensiv.partial_id.correlation_moments import PartialCorrelations
from sensiv.partial_id.solver import solve

# Relative gap between a programme's min and max treated as rounding (the set is one point).
POINT_SET_TOL = 1e-9
# Compiled programmes kept, one per number of instruments.
CACHED_PROGRAMMES = 8
# A warning from Programmes.piece names the caller of correlation_bounds (piece is called
# from correlation._sets, which correlation_bounds calls).
WARN_LEVEL = 4


class Programmes:
    """The bound programmes for ``K`` instruments, built once (DPP) and re-solved by setting
    parameter values; the partial correlations are parameters too, so a bootstrap replicate
    or a new data set re-uses the compiled programmes.

    Parameters
    ----------
    k : int
        Number of instruments ``K``.
    """

    def __init__(self, k: int) -> None:
        import cvxpy as cp

        self.zy = cp.Parameter(k, name="corr_zy")
        self.zx = cp.Parameter(k, name="corr_zx")
        self.xy = cp.Parameter(name="corr_xy")
        self.ratio = cp.Parameter(nonneg=True, name="max_ratio")
        self.bounds = {}
        self.min_ratio = {}
        for s in (1, -1):
            # Bound programme for sign s of corr(X, u), standardised units (β = b·σ_y/σ_X):
            #   minimise / maximise  b                       over b, e
            #   subject to           e = ρ_xy − b            (∝ cov(X, u))
            #                        s·e ≥ 0                 (sign of corr(X, u))
            #                        s·(ρ_zy − b ρ_zx) ≥ 0   (each instrument: same sign)
            #                        s·(ρ_zy − b ρ_zx) ≤ r̄·s·e   (at most r̄ times as strong)
            # The auxiliary e keeps r̄ multiplying a variable only, so the programme is DPP.
            b, e = cp.Variable(name="b"), cp.Variable(name="e")
            z_u = s * (self.zy - cp.multiply(self.zx, b))
            constraints = [e == self.xy - b, s * e >= 0, z_u >= 0, z_u <= s * self.ratio * e]
            pair = (cp.Problem(cp.Minimize(b), constraints),
                    cp.Problem(cp.Maximize(b), constraints),
                    cp.Problem(cp.Minimize(0), constraints))
            # Smallest consistent ratio for sign s: min_b max_k s·g_k(b) / (s·e(b)) is a
            # linear-fractional programme; with t = 1/(s·e(b)) and v = b·t (Charnes–Cooper):
            #   minimise  ρ                                   over ρ, v, t
            #   subject to s·(ρ_xy t − v) = 1,  t ≥ 0
            #             0 ≤ s·(ρ_zy t − ρ_zx v) ≤ ρ       (elementwise over instruments)
            # t = 0 is the limit |b| → ∞, so the optimum is the infimum over the closure.
            rho, v, t = cp.Variable(name="ratio"), cp.Variable(name="v"), cp.Variable(name="t")
            scaled = s * (cp.multiply(self.zy, t) - cp.multiply(self.zx, v))
            least = cp.Problem(cp.Minimize(rho), [s * (self.xy * t - v) == 1, t >= 0,
                                                  scaled >= 0, scaled <= rho])
            for problem in (*pair, least):
                assert problem.is_dcp(dpp=True)
            self.bounds[s] = pair
            self.min_ratio[s] = least

    def load(self, pc: PartialCorrelations) -> None:
        """Set the partial correlations of one data set (or bootstrap replicate)."""
        self.zy.value = pc.zy
        self.zx.value = pc.zx
        self.xy.value = pc.xy

    def piece(self, sign: int, ratio: float) -> tuple[float, float] | None:
        """Ends of the sign-``s`` piece at ``ratio`` (standardised units), or ``None`` if empty."""
        from cvxpy.settings import INFEASIBLE_OR_UNBOUNDED

        self.ratio.value = ratio
        lower, upper, feasibility = self.bounds[sign]
        ends = []
        for problem, side in ((lower, "lower"), (upper, "upper")):
            what = f"{side} bound programme (sign {sign:+d}, r̄ = {ratio:g})"
            try:
                solution = solve(problem, what=what)
            except SolverError:
                if problem.status != INFEASIBLE_OR_UNBOUNDED:
                    raise
                # HiGHS's presolve may stop at "infeasible or unbounded"; a feasibility
                # solve tells which.
                check = solve(feasibility, what=f"feasibility programme (sign {sign:+d})")
                if check.outcome == "infeasible":
                    return None
                ends.append(-math.inf if side == "lower" else math.inf)
                continue
            if solution.outcome == "infeasible":
                if ends:
                    warnings.warn(f"the {what} is infeasible although the lower bound was "
                                  "found; the set is treated as empty", InaccurateSolveWarning,
                                  stacklevel=WARN_LEVEL)
                return None
            ends.append(solution.value)
        low, high = ends
        if low > high:
            if low - high > POINT_SET_TOL * max(1.0, abs(low)):
                warnings.warn(f"the bound programmes (sign {sign:+d}, r̄ = {ratio:g}) crossed: "
                              f"lower {low!r} > upper {high!r}; the set is treated as empty",
                              InaccurateSolveWarning, stacklevel=WARN_LEVEL)
                return None
            low, high = high, low
        return low, high

    def least_ratio(self, sign: int) -> float | None:
        """Infimum of the ratios with a non-empty sign-``s`` piece, or ``None`` if none."""
        solution = solve(self.min_ratio[sign],
                         what=f"smallest-ratio programme (sign {sign:+d})")
        if solution.outcome != "optimal":
            return None
        return max(solution.value, 0.0)


@functools.lru_cache(maxsize=CACHED_PROGRAMMES)
def compiled_programmes(k: int) -> Programmes:
    """The :class:`Programmes` for ``k`` instruments, compiled once per process."""
    return Programmes(k)


# ----------------------------------------------------------------------------- set algebra
def union(pieces: Sequence[tuple[float, float]]) -> tuple[Interval, ...]:
    """Sorted union of intervals, merging those that overlap or touch."""
    merged: list[list[float]] = []
    for low, high in sorted(pieces):
        if merged and low <= merged[-1][1]:
            merged[-1][1] = max(merged[-1][1], high)
        else:
            merged.append([low, high])
    return tuple(Interval(low, high) for low, high in merged)


def scale_piece(piece: tuple[float, float] | None,
                scale: float) -> tuple[float, float] | None:
    """A piece in standardised units times ``scale = σ_y/σ_X`` (``None`` stays ``None``)."""
    return None if piece is None else (piece[0] * scale, piece[1] * scale)


def breakdown_ratio(pc: PartialCorrelations, signs: Sequence[int],
                    threshold: float) -> float | None:
    r"""Smallest ``r̄ ∈ [0, 1]`` whose identified set contains ``threshold``, exactly.

    For a fixed ``b₀ = threshold·σ_X/σ_y`` the conditions are linear in ``r̄``: with
    ``E = s(ρ_xy − b₀)`` and ``G_k = s(ρ_{z_k y} − b₀ ρ_{z_k x})``, ``b₀`` is in the sign-``s``
    piece iff ``E ≥ 0``, ``G_k ≥ 0`` and ``G_k ≤ r̄ E`` for all ``k``, i.e. from
    ``r̄_s = max_k G_k / E`` on (``0`` if ``E = 0`` and every ``G_k = 0``).  The breakdown ratio
    is the smallest ``r̄_s`` over the admissible signs; ``None`` if it exceeds 1.
    """
    b0 = threshold / pc.scale
    best = math.inf
    for s in signs:
        e = s * (pc.xy - b0)
        g = s * (pc.zy - b0 * pc.zx)
        if e < 0.0 or np.any(g < 0.0):
            continue
        if e == 0.0:
            if np.all(g == 0.0):
                best = 0.0
            continue
        best = min(best, max(float(np.max(g / e)), 0.0))
    return best if best <= 1.0 else None
