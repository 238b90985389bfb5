r"""Absorbed fixed effects: partialling the indicators of categorical columns out of every model
column without forming them.

By the Frisch–Waugh–Lovell theorem, 2SLS with the indicators of fixed effects ``D`` among the
controls equals 2SLS on the columns residualised on ``D`` (the *demeaned* columns), with the
same coefficients, residuals and scores; only the count of parameters (for ``small``
corrections) remembers the levels.  So the moments and the sweep machinery run unchanged on
the demeaned columns, and nothing is refitted per curve point.

* **One fixed effect**: exact, ``xᵢ − x̄_g(i)`` with weighted group means.
* **Several**: alternating projections (Guimarães & Portugal 2010; Gaure 2013) — demean by
  each fixed effect in turn, repeat — accelerated by the Irons–Tuck (1969) extrapolation of
  every second iterate (the scheme fixest also uses; it needs two map evaluations per step and
  no tuning), column by column, until the relative change of the column falls below the
  tolerance (default :data:`DEFAULT_TOLERANCE`).  When all but the largest fixed effect have
  few levels together, the iteration starts from their exact solution beside the largest
  (:mod:`sensiv.estimation.absorb_direct`); its first step checks it by one plain sweep (with
  two fixed effects, by the exact length of that sweep's change from one group sum), which
  usually changes it by rounding only, so one step is reported.
* **Singletons** (a level met in a single row) are dropped, iterated until none remain for
  several fixed effects: such a row is fitted exactly by its own indicator and only inflates
  the row count (common practice, no source).
* **Parameters**: the first fixed effect counts ``L₁ − 1`` levels (the constant takes one), the
  second ``L₂ − c`` with ``c`` the connected components of the two (the exact rank of their
  indicators), every further one ``L_j − 1`` (possible further redundancies are not searched,
  common practice, no source).  A fixed effect nested in the cluster variable counts nothing
  under cluster covariances (common practice, no source).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from sensiv.data.spec import DEFAULT_ABSORB_TOLERANCE
from sensiv.estimation import absorb_direct
from sensiv.estimation.absorb_direct import (DirectPlan, direct_plan, direct_residual,
                                             sweep_change)

DEFAULT_TOLERANCE = DEFAULT_ABSORB_TOLERANCE
"""Relative change of a demeaned column below which alternating projections stop (the
default of ``Spec.absorb_tolerance``)."""

MAX_ITERATIONS = 10_000
"""Accelerated steps (two sweeps each) after which alternating projections give up and warn."""

PAIR_TABLE = 20_000_000
"""Largest product of two fixed effects' levels whose pairs are tabulated densely (8 bytes
each) before counting connected components."""

ABSORBED_SHARE = 1e-7
"""A column whose within-group spread is below this share of its total spread is absorbed."""


@dataclass(frozen=True, slots=True)
class Absorption:
    """What was absorbed and how.

    Attributes
    ----------
    effects : tuple of str
        The absorbed columns, in the order given.
    levels : tuple of int
        Levels of each in the rows used (after singletons are dropped).
    counted : tuple of int
        Levels of each counted as parameters for small-sample corrections.
    nested : tuple of bool
        Whether each is nested in the cluster variable (then counted as nothing under
        cluster covariances).
    n_singletons : int
        Rows dropped because their level of some fixed effect occurs once.
    iterations : int
        Accelerated alternating-projection steps taken (1 for one fixed effect: exact; 1
        also when the direct solve of the small fixed effects stood after one checking sweep).
    tolerance : float
        Achieved relative change of the demeaned columns (0 for one fixed effect: exact).
    requested_tolerance : float
    dropped_controls : tuple of str
        Controls with no variation left within the fixed effects, dropped from the model.
    streamed : bool
        Whether the demeaning streamed over chunks (one fixed effect on a file, or two on a
        file too large to hold in memory).
    """

    effects: tuple[str, ...]
    levels: tuple[int, ...]
    counted: tuple[int, ...]
    nested: tuple[bool, ...]
    n_singletons: int
    iterations: int
    tolerance: float
    requested_tolerance: float = DEFAULT_TOLERANCE
    dropped_controls: tuple[str, ...] = ()
    streamed: bool = False

    def parameters(self, se: str) -> int:
        """Absorbed levels counted as parameters under covariance type ``se``."""
        return int(sum(c for c, nested in zip(self.counted, self.nested)
                       if not (se == "cluster" and nested)))

    def to_dict(self) -> dict:
        """The JSON keys every data command carries when something is absorbed."""
        return {"absorbed": dict(zip(self.effects, self.levels)),
                "n_singletons": self.n_singletons,
                "absorb_iterations": self.iterations,
                "absorb_tolerance": self.tolerance}

    def assumptions(self) -> list[str]:
        listed = ", ".join(f"'{name}' ({levels} levels)"
                           for name, levels in zip(self.effects, self.levels))
        steps = f"{self.iterations} step{'s' if self.iterations != 1 else ''}"
        # The requested tolerance, not the change reached (rounding noise that differs in its
        # last digits between the in-memory and the streamed solve), unless it was missed.
        how = ("exactly, by group means" if len(self.effects) == 1 else
               f"by alternating projections to within the relative tolerance "
               f"{self.requested_tolerance:.1e} after {steps}"
               if self.tolerance <= self.requested_tolerance else
               f"by alternating projections, stopped after {steps} at a relative change "
               f"{self.tolerance:.1e} above the tolerance {self.requested_tolerance:.1e}")
        text = [f"fixed effects of {listed} absorbed ({how}): every coefficient, first stage "
                "and direct effect is a within-group quantity; the fixed effects' own "
                "coefficients are not reported"]
        if self.n_singletons:
            text.append(f"{self.n_singletons} singleton rows (alone in their level of a "
                        "fixed effect) dropped")
        return text


def encode(labels: np.ndarray) -> tuple[np.ndarray, int]:
    """Consecutive integer codes of ``labels`` (no missing) and the number of levels.

    The codes are ``intp`` (64 bits): ``np.bincount`` converts any other integer type on every
    call, which made the demeaning half again slower with 32-bit codes (measured).  Integer
    labels in ``[0, 2n)`` are numbered by a table of the values present (in their order, twice
    as fast as hashing them, measured); any other labels by pandas' hash table."""
    import pandas as pd

    if labels.dtype.kind in "iu" and labels.size:
        low, high = int(labels.min()), int(labels.max())
        if low >= 0 and high < 2 * labels.size:
            present = np.bincount(labels, minlength=high + 1) > 0
            numbering = np.cumsum(present, dtype=np.intp) - 1
            return np.take(numbering, labels), int(numbering[-1]) + 1
    codes, uniques = pd.factorize(labels, sort=False)
    return codes.astype(np.intp, copy=False), len(uniques)


def recode(codes: np.ndarray) -> tuple[np.ndarray, int]:
    """Codes renumbered consecutively after rows were removed."""
    present = np.bincount(codes) > 0
    new = np.cumsum(present) - 1
    return new[codes], int(present.sum())


def singleton_rows(codes: Sequence[np.ndarray]) -> np.ndarray:
    """Mask of the rows kept after dropping singletons, iterated until none remain."""
    keep = np.ones(len(codes[0]), dtype=bool)
    first = True  # every row kept: the codes themselves, not a masked copy
    while True:
        bad = np.zeros_like(keep)
        for c in codes:
            if first:
                bad |= np.take(np.bincount(c) == 1, c)
                continue
            counts = np.bincount(c[keep])
            bad[keep] |= counts[c[keep]] == 1
        if not bad.any() or len(codes) == 1:
            return keep & ~bad
        keep &= ~bad
        first = False


def group_weights(codes: np.ndarray, n_levels: int, weights: np.ndarray | None) -> np.ndarray:
    """Per-level row counts or weight sums."""
    if weights is None:
        return np.bincount(codes, minlength=n_levels).astype(np.float64)
    return np.bincount(codes, weights=weights, minlength=n_levels)


def demean_once(column: np.ndarray, codes: np.ndarray, totals: np.ndarray,
                weights: np.ndarray | None) -> np.ndarray:
    """``xᵢ − x̄_g(i)`` with (weighted) group means; exact for one fixed effect."""
    w_col = column if weights is None else column * weights
    means = np.bincount(codes, weights=w_col, minlength=totals.size) / totals
    return column - means[codes]


def _dot(a: np.ndarray, b: np.ndarray) -> float:
    # einsum, not BLAS: a threaded BLAS dot of one long vector is slow on a busy machine.
    return float(np.einsum("i,i->", a, b))


def _sweep(column, groups, weights):
    for codes, totals in groups:
        column = demean_once(column, codes, totals, weights)
    return column


def demean_column(column: np.ndarray, groups: Sequence[tuple[np.ndarray, np.ndarray]],
                  weights: np.ndarray | None, tolerance: float,
                  max_iterations: int, plan: DirectPlan | None = None,
                  buffers: tuple[np.ndarray, np.ndarray] | None = None
                  ) -> tuple[np.ndarray, int, float]:
    """One column residualised on several fixed effects by accelerated alternating projections.

    ``groups`` pairs each fixed effect's codes with its level totals.  Returns the demeaned
    column, the steps taken and the achieved relative change (change of the column in the last
    step over the norm of the column demeaned by the first fixed effect, or by the largest one
    with a ``plan``).  With a ``plan`` (:mod:`sensiv.estimation.absorb_direct`) the projections
    start from the direct solution: its first step is one plain sweep, and the solution stands
    when that sweep changes it by no more than the tolerance (else the accelerated steps go on
    from there, counted from 2).  ``buffers``: two row-sized arrays the direct solve may use
    (the column returned may then be one of them: copy it before the next call); with them
    ``column`` itself is shifted in place.
    """
    out, scratch = (None, None) if buffers is None else buffers
    shifted = np.subtract(column, column[0], out=None if buffers is None else column)
    if plan is not None:
        start, scale = direct_residual(plan, shifted, weights, out, scratch)
        if scale == 0.0:
            return np.zeros_like(start), 1, 0.0
        change = sweep_change(plan, start, weights, scratch)  # two fixed effects: no sweep
        if change is not None and change <= tolerance * scale:
            return start, 1, change / scale
        x = _sweep(start, groups, weights)
        difference = x - start
        change = np.sqrt(_dot(difference, difference)) / scale
        if change <= tolerance or max_iterations <= 1:
            return x, 1, change
        first, max_iterations = 2, max_iterations - 1
    else:
        x = _sweep(shifted, groups, weights)
        scale = np.sqrt(_dot(x, x))
        if scale == 0.0:
            return x, 1, 0.0
        first, change = 1, np.inf
    for step in range(first, first + max_iterations):
        fx = _sweep(x, groups, weights)
        ffx = _sweep(fx, groups, weights)
        d1 = ffx - fx
        d2 = d1 - (fx - x)
        denom = _dot(d2, d2)
        # Irons & Tuck (1969): extrapolate along the last difference; plain sweep if degenerate.
        new = ffx - (_dot(d1, d2) / denom) * d1 if denom > 0 else ffx
        step_change = new - x
        change = np.sqrt(_dot(step_change, step_change)) / scale
        x = new
        if change <= tolerance:
            return x, step, change
    return x, first + max_iterations - 1, change


def demean_columns(values: np.ndarray, codes: Sequence[np.ndarray], levels: Sequence[int],
                   weights: np.ndarray | None, tolerance: float = DEFAULT_TOLERANCE,
                   max_iterations: int = MAX_ITERATIONS,
                   direct_levels: int | None = None) -> tuple[np.ndarray, int, float]:
    """Every column of ``values`` (rows × columns) residualised on the fixed effects, in place.

    Returns the array, the largest number of steps over the columns and the largest achieved
    relative change (1 and 0.0 for one fixed effect, which is exact).  Several fixed effects
    whose all but the largest have at most ``direct_levels`` levels together (default
    :data:`sensiv.estimation.absorb_direct.DIRECT_LEVELS`, read at the call) start from the
    direct solve of that module (``direct_levels=0``: plain alternating projections).
    """
    if direct_levels is None:
        direct_levels = absorb_direct.DIRECT_LEVELS
    groups = [(c, group_weights(c, n, weights)) for c, n in zip(codes, levels)]
    plan = direct_plan(codes, levels, weights, direct_levels) if len(groups) > 1 else None
    buffers = None if plan is None else (np.empty(values.shape[0]), np.empty(values.shape[0]))
    steps, achieved = 1, 0.0
    for j in range(values.shape[1]):
        column = values[:, j]
        if len(groups) == 1:
            values[:, j] = demean_once(column - column[0], *groups[0], weights)
            continue
        values[:, j], used, reached = demean_column(column, groups, weights, tolerance,
                                                    max_iterations, plan, buffers)
        steps, achieved = max(steps, used), max(achieved, reached)
    return values, steps, achieved


def spread(column: np.ndarray, weights: np.ndarray | None) -> float:
    """Weighted root sum of squares of ``column`` around its weighted mean."""
    if weights is None:
        centred = column - column.mean()
        return float(np.sqrt(_dot(centred, centred)))
    centred = column - _dot(weights, column) / weights.sum()
    return float(np.sqrt(_dot(weights * centred, centred)))


def absorbed_by(column: np.ndarray, codes: Sequence[np.ndarray], levels: Sequence[int],
                weights: np.ndarray | None) -> list[int]:
    """Indices of the fixed effects that alone leave no variation in ``column``."""
    total = spread(column, weights)
    found = []
    for j, (c, n) in enumerate(zip(codes, levels)):
        within = demean_once(column - column[0], c, group_weights(c, n, weights), weights)
        if not spread(within, weights) > ABSORBED_SHARE * total:
            found.append(j)
    return found


def components(codes_a: np.ndarray, n_a: int, codes_b: np.ndarray, n_b: int) -> int:
    """Connected components of the bipartite graph of two fixed effects' levels."""
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    if n_a * n_b <= PAIR_TABLE:  # the distinct pairs of levels, not one edge per row
        codes_a, codes_b = np.nonzero(np.bincount(codes_a * n_b + codes_b,
                                                  minlength=n_a * n_b).reshape(n_a, n_b))
    graph = coo_matrix((np.ones(codes_a.size), (codes_a, n_a + codes_b)),
                       shape=(n_a + n_b, n_a + n_b))
    count, _ = connected_components(graph, directed=False)
    return int(count)


def counted_levels(codes: Sequence[np.ndarray], levels: Sequence[int]) -> tuple[int, ...]:
    """Levels counted as parameters (see the module notes), beside the constant."""
    counted = [levels[0] - 1]
    if len(levels) > 1:
        counted.append(levels[1] - components(codes[0], levels[0], codes[1], levels[1]))
    counted += [n - 1 for n in levels[2:]]
    return tuple(int(c) for c in counted)


def nested_in(codes: np.ndarray, n_levels: int, cluster_codes: np.ndarray,
              n_clusters: int) -> bool:
    """Whether every level of a fixed effect lies within a single cluster."""
    low = np.full(n_levels, n_clusters)
    high = np.full(n_levels, -1)
    np.minimum.at(low, codes, cluster_codes)
    np.maximum.at(high, codes, cluster_codes)
    return bool(np.all(low == high))


def absorb_keys(result) -> dict:
    """The JSON keys of the absorbed fixed effects (none when nothing is absorbed)."""
    absorption = getattr(result, "absorption", None)
    return absorption.to_dict() if absorption is not None else {}


def absorb_assumptions(result) -> list[str]:
    absorption = getattr(result, "absorption", None)
    return absorption.assumptions() if absorption is not None else []
