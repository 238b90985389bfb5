"""Exceptions and warnings shared by every layer.

``InputError`` is the caller's mistake (bad data, bad option); the command line turns it into
exit code 2 with its message and no traceback.  Warnings report conditions under which a
result is still returned but must be read with care.
"""

from __future__ import annotations


class InputError(ValueError):
    """Bad input: the message names the problem, the offending value and the fix."""


class ConstantControlError(InputError):
    """A text control takes a single value in the rows kept (``column`` names it); callers
    that select a subgroup catch it to leave the control out there."""

    def __init__(self, message: str, column: str) -> None:
        super().__init__(message)
        self.column = column


class WeakInstrumentWarning(UserWarning):
    """The first stage is weak: Wald intervals and tests may be badly sized."""


class InaccurateSolveWarning(UserWarning):
    """An optimisation solver returned a solution it flags as inaccurate."""


class IdentifierWarning(UserWarning):
    """A numeric control looks like an identifier (integer codes with many distinct values)."""


class FewClustersWarning(UserWarning):
    """Too few clusters for cluster-robust intervals to be trusted at their nominal level."""


class AbsorbConvergenceWarning(UserWarning):
    """Alternating projections for several absorbed fixed effects stopped before reaching the
    requested tolerance."""


class SolverError(RuntimeError):
    """An optimisation solver failed; the status is in the message."""
