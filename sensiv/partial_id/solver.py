"""Solving cvxpy problems: quiet standard output, every status mapped to an outcome.

Some solvers (HiGHS through cvxpy) print a banner straight to file descriptor 1 once per
process, which would corrupt ``--json`` output; :func:`quiet_stdout` silences the descriptor
itself, not just ``sys.stdout``.
"""

from __future__ import annotations

import contextlib
import os
import sys
import warnings
from dataclasses import dataclass
from typing import Literal

from sensiv.core.errors import InaccurateSolveWarning, SolverError

LP_SOLVER = "HIGHS"
Outcome = Literal["optimal", "infeasible", "unbounded"]


@contextlib.contextmanager
def quiet_stdout():
    """Redirect file descriptor 1 to ``/dev/null`` for the duration of the block."""
    try:
        sys.stdout.flush()
    except (AttributeError, OSError, ValueError):
        pass
    try:
        saved = os.dup(1)
    except OSError:
        yield
        return
    try:
        with open(os.devnull, "w") as devnull:
            os.dup2(devnull.fileno(), 1)
            try:
                yield
            finally:
                os.dup2(saved, 1)
    finally:
        os.close(saved)


@dataclass(frozen=True, slots=True)
class Solution:
    """Outcome of one solve: ``value`` is the optimum (``±inf`` when unbounded, ``nan`` when
    infeasible)."""

    outcome: Outcome
    value: float
    status: str


def solve(problem, *, solver: str = LP_SOLVER, what: str = "programme") -> Solution:
    """Solve ``problem`` and map its status.

    ``optimal`` → the optimum; ``optimal_inaccurate`` → the optimum with an
    :class:`InaccurateSolveWarning`; ``infeasible`` / ``unbounded`` (and their inaccurate forms)
    → a :class:`Solution` saying so (a finding, not an error); anything else →
    :class:`SolverError`.
    Variables are never read after a failed solve.
    """
    import cvxpy as cp

    try:
        with quiet_stdout():
            problem.solve(solver=solver)
    except cp.error.SolverError as exc:
        raise SolverError(f"the solver {solver} failed on the {what}: {exc}") from exc
    status = problem.status
    if status == cp.OPTIMAL:
        return Solution("optimal", float(problem.value), status)
    if status == cp.OPTIMAL_INACCURATE:
        warnings.warn(f"the solver {solver} flags its solution of the {what} as inaccurate",
                      InaccurateSolveWarning, stacklevel=2)
        return Solution("optimal", float(problem.value), status)
    if status in (cp.INFEASIBLE, cp.INFEASIBLE_INACCURATE):
        return Solution("infeasible", float("nan"), status)
    if status in (cp.UNBOUNDED, cp.UNBOUNDED_INACCURATE):
        sense = 1.0 if isinstance(problem.objective, cp.Maximize) else -1.0
        return Solution("unbounded", sense * float("inf"), status)
    raise SolverError(f"the solver {solver} stopped with status '{status}' on the {what}")
