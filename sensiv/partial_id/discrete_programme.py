"""The discrete bound programmes in cvxpy, built once per table shape and solved by setting
Parameter values (the variables are described in :mod:`sensiv.partial_id.discrete_types`).

Every programme is DPP: the data ``P(y, x | z)``, ``P(z)``, the budget ``ε``, the defier cap
``δ`` and the threshold ``θ₀`` are Parameters, so a curve or a bootstrap replicate only maps
new values into the solver's matrices.  Every solve goes through
:func:`sensiv.partial_id.solver.solve`, which checks the status each time.
"""

from __future__ import annotations

import numpy as np

from sensiv.core.errors import SolverError
from sensiv.partial_id.discrete_types import Columns, Design, Enumeration, make_design
from sensiv.partial_id.solver import solve

ZERO_TOLERANCE = 1e-9
"""A budget or share below this (solver round-off) is reported as 0."""

CURVE_TOLERANCE = 1e-9
"""A solved midpoint this close to the chord of its span makes the span linear (see
:func:`curve`); interpolated points are then within 3 times this of the optimum."""


# ------------------------------------------------------------------------------- programmes
def _blocks(copies: list[Columns]):
    """Block matrices of independent copies of the variables stacked in one vector.

    Returns the equality matrix (each copy's ``observe`` rows, then its ``balance`` rows), the
    matrix that places ``P(y, x | z)`` on the ``observe`` rows of every copy, and the
    per-copy column slices.  One constraint object per kind keeps cvxpy's per-solve overhead
    small, which is most of the cost of these small programmes.
    """
    import scipy.sparse as sp

    n_obs = copies[0].observe.shape[0]
    eq_blocks, places, slices, start = [], [], [], 0
    for columns in copies:
        eq_blocks.append(sp.vstack([columns.observe, columns.balance]))
        places.append(sp.vstack([sp.identity(n_obs), sp.csr_matrix((columns.balance.shape[0],
                                                                     n_obs))]))
        slices.append(slice(start, start + columns.size))
        start += columns.size
    return (sp.block_diag(eq_blocks, format="csr"), sp.vstack(places, format="csr"), slices)


class Programmes:
    """Every programme for one table shape, built once; the data and the budgets are cvxpy
    Parameters shared by all of them, so a sweep or a bootstrap only sets values.

    Parameters: ``observed`` = P(y, x | z) (K·J·L), ``weights`` = P(z) (K), ``budget`` = ε,
    ``defiers`` = δ (set to 1 when monotonicity is not assumed: the cap is then void),
    ``threshold`` = θ₀.
    """

    def __init__(self, shape: tuple[int, int, int], values, *,
                 enumeration: Enumeration = "reduced") -> None:
        import cvxpy as cp

        K, J, L = shape
        values = np.asarray(values, dtype=np.float64)
        self.shape = (K, J, L)
        self.observed = cp.Parameter(K * J * L, nonneg=True, name="observed")
        self.weights = cp.Parameter(K, nonneg=True, name="weights")
        self.budget = cp.Parameter(nonneg=True, name="budget")
        self.defiers = cp.Parameter(nonneg=True, name="defiers")
        self.threshold = cp.Parameter(name="threshold")
        self.designs = {c: make_design(K, J, L, values, c, enumeration) for c in range(1, J)}
        any_columns = self.designs[1].upper
        self._intervals = {c: self._interval(d) for c, d in self.designs.items()}
        self._breakdowns = {c: self._breakdown(d) for c, d in self.designs.items()}
        self._fit = self._least(any_columns, "violates", capped=True)
        self._defier_fit = self._least(any_columns, "defies", capped=False)

    @staticmethod
    def _checked(problem):
        if not problem.is_dcp(dpp=True):  # pragma: no cover - a construction error
            raise AssertionError("discrete bound programme is not DPP")
        return problem

    # Programmes -------------------------------------------------------------------------
    def _interval(self, design: Design):
        import cvxpy as cp
        import scipy.sparse as sp

        # Both bounds at once (the two copies share no variable, so the optimum of the
        # difference is the difference of the optima, and one solve replaces two):
        #   maximise    effect_upper(u) − effect_lower(l)
        #   subject to  observe·u = P(y,x|z),  balance·u = 0,
        #               violates·u ≤ ε,  defies·u ≤ δ,  and the same for l
        #   variables   u, l ≥ 0 (class masses; best / worst member of each class), v = (u, l)
        up, lo = design.upper, design.lower
        equal, place, (su, sl) = _blocks([up, lo])
        caps = sp.block_diag([sp.csr_matrix(np.vstack([c.violates, c.defies]))
                              for c in (up, lo)], format="csr")
        v = cp.Variable(up.size + lo.size, nonneg=True, name="types")
        signed = sp.hstack([up.weighted, -lo.weighted], format="csr")
        objective = np.concatenate([up.fixed, -lo.fixed]) @ v + self.weights @ (signed @ v)
        limits = cp.hstack([self.budget, self.defiers, self.budget, self.defiers])
        problem = cp.Problem(cp.Maximize(objective),
                             [equal @ v == place @ self.observed, caps @ v <= limits])
        return self._checked(problem), v, (su, sl)

    def _breakdown(self, design: Design):
        import cvxpy as cp
        import scipy.sparse as sp

        # Smallest budget at which the identified set contains θ₀ (the set is an interval at
        # every ε, so θ₀ is in it iff some fitting distribution has effect θ₀):
        #   minimise    violates·(u + l)
        #   subject to  observe·(u + l) = P(y,x|z),  balance·u = 0,  balance·l = 0,
        #               defies·(u + l) ≤ δ,  effect_upper(u) + effect_lower(l) = θ₀
        #   variables   u, l ≥ 0 (each class's mass split between its best and worst member)
        up, lo = design.upper, design.lower
        n_obs = up.observe.shape[0]
        equal = sp.vstack([sp.hstack([up.observe, lo.observe]),
                           sp.block_diag([up.balance, lo.balance])], format="csr")
        place = sp.vstack([sp.identity(n_obs), sp.csr_matrix((equal.shape[0] - n_obs,
                                                               n_obs))], format="csr")
        v = cp.Variable(up.size + lo.size, nonneg=True, name="types")
        effect = (np.concatenate([up.fixed, lo.fixed]) @ v
                  + self.weights @ (sp.hstack([up.weighted, lo.weighted], format="csr") @ v))
        constraints = [equal @ v == place @ self.observed,
                       np.concatenate([up.defies, lo.defies]) @ v <= self.defiers,
                       effect == self.threshold]
        objective = cp.Minimize(np.concatenate([up.violates, lo.violates]) @ v)
        return self._checked(cp.Problem(objective, constraints))

    def _least(self, columns: Columns, share: str, *, capped: bool):
        import cvxpy as cp

        # Smallest violating share (``share='violates'``) or defier share that fits the data:
        #   minimise    share·v
        #   subject to  observe·v = P(y,x|z),  balance·v = 0,  [defies·v ≤ δ]
        #   variables   v ≥ 0
        equal, place, _ = _blocks([columns])
        v = cp.Variable(columns.size, nonneg=True, name="types")
        constraints = [equal @ v == place @ self.observed]
        if capped:
            constraints.append(columns.defies @ v <= self.defiers)
        return self._checked(cp.Problem(cp.Minimize(getattr(columns, share) @ v), constraints))

    # Solving ----------------------------------------------------------------------------
    def set_data(self, counts: np.ndarray) -> None:
        """Set ``P(y, x | z)`` and ``P(z)`` from counts ``[z, x, y]`` (every ``z`` non-empty)."""
        counts = np.asarray(counts, dtype=np.float64)
        per_z = counts.sum(axis=(1, 2))
        self.observed.value = (counts / per_z[:, None, None]).ravel()
        self.weights.value = per_z / per_z.sum()

    def interval(self, contrast: int, budget: float, defiers: float
                 ) -> tuple[float, float] | None:
        """``(lower, upper)`` bounds at budget ε and defier cap δ; ``None`` if the model does
        not fit the data there."""
        problem, v, (su, sl) = self._intervals[contrast]
        self.budget.value, self.defiers.value = budget, defiers
        solution = solve(problem, what="discrete bounds programme")
        if solution.outcome == "infeasible":
            return None
        _bounded(solution, "discrete bounds programme")
        design, w = self.designs[contrast], self.weights.value
        x = v.value  # read only after an optimal solve
        ends = [columns.fixed @ x[part] + w @ (columns.weighted @ x[part])
                for columns, part in ((design.lower, sl), (design.upper, su))]
        return float(ends[0]), float(ends[1])

    def min_budget(self, defiers: float) -> float | None:
        """Smallest ε at which the model fits; ``None`` when none does (the defier cap
        contradicts the data)."""
        self.defiers.value = defiers
        return _share(solve(self._fit, what="minimum-budget programme"), "minimum-budget")

    def min_defiers(self) -> float:
        """Smallest defier share that fits the data (with no cap on the violating share)."""
        value = _share(solve(self._defier_fit, what="minimum-defier programme"),
                       "minimum-defier")
        if value is None:  # pragma: no cover - every distribution fits some types
            raise SolverError("the minimum-defier programme is infeasible, which it cannot be")
        return value

    def breakdown(self, contrast: int, threshold: float, defiers: float) -> float | None:
        """Smallest ε whose bounds contain θ₀; ``None`` when no ε ≤ 1 does."""
        self.threshold.value, self.defiers.value = threshold, defiers
        return _share(solve(self._breakdowns[contrast], what="breakdown programme"),
                      "breakdown")


def _bounded(solution, what: str) -> None:
    if solution.outcome != "optimal":  # pragma: no cover - all variables are bounded
        raise SolverError(f"the {what} returned status '{solution.status}'")


def _share(solution, what: str) -> float | None:
    if solution.outcome == "infeasible":
        return None
    _bounded(solution, f"{what} programme")
    value = min(max(solution.value, 0.0), 1.0)
    return 0.0 if value < ZERO_TOLERANCE else value


# ------------------------------------------------------------------------------- curves
def curve(programmes: Programmes, contrast: int, grid: np.ndarray, defiers: float,
          min_budget: float | None, *, every_point: bool = False
          ) -> list[tuple[float, float] | None]:
    r"""Bounds ``(lower, upper)`` at every budget of an increasing ``grid``.

    Points below ``min_budget`` (the smallest fitting budget) have no bounds and are not
    solved.  With ``every_point`` each remaining point is solved; otherwise spans are halved
    until they are linear, which costs a few solves per kink instead of one per point.

    Why that is exact: ``ε`` enters only the right-hand side of one constraint of a
    maximisation, so the upper bound :math:`U(ε)` is concave (and the lower bound convex).
    The gap :math:`g = U - \text{chord}` over a span ``[a, b]`` is then concave with
    :math:`g(a) = g(b) = 0`, hence :math:`0 \le g(x) \le g(m)\,(b-a)/\min(m-a, b-m)` for an
    interior point ``m``.  If the solved ``U(m)`` is within :data:`CURVE_TOLERANCE` of the
    chord, every point of the span is within 3 times that of the chord (``m`` is the middle
    grid point), and the chord is used there.  The same holds for the lower bound.
    """
    n = len(grid)
    out: list[tuple[float, float] | None] = [None] * n
    if min_budget is None:
        return out
    solved = np.zeros(n, dtype=bool)

    def at(i: int):
        if not solved[i]:
            out[i] = programmes.interval(contrast, float(grid[i]), defiers)
            solved[i] = True
        return out[i]

    first = int(np.searchsorted(grid, min_budget, side="left"))
    if every_point:
        for i in range(first, n):
            at(i)
        return out
    spans = [(first, n - 1)] if first < n else []
    while spans:
        i, j = spans.pop()
        ends = at(i), at(j)
        if j - i < 2:
            continue
        m = (i + j) // 2
        middle = at(m)
        if None not in (*ends, middle):
            share = (grid[i:j + 1] - grid[i]) / (grid[j] - grid[i])
            chord = [ends[0][k] + share * (ends[1][k] - ends[0][k]) for k in (0, 1)]
            if max(abs(middle[k] - chord[k][m - i]) for k in (0, 1)) <= CURVE_TOLERANCE:
                for k in range(i + 1, j):
                    if not solved[k]:
                        out[k] = (float(chord[0][k - i]), float(chord[1][k - i]))
                        solved[k] = True
                continue
        spans += [(m, j), (i, m)]
    return out
