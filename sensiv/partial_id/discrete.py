r"""Bounds on the effect of a discrete treatment when a randomised discrete instrument may
change the outcome directly, with a budget on how many units it does so for.

The response types and their exact reduction are in :mod:`sensiv.partial_id.discrete_types`,
the cvxpy programmes in :mod:`sensiv.partial_id.discrete_programme`, the counts tables in
:mod:`sensiv.partial_id.discrete_data` and the result objects in
:mod:`sensiv.partial_id.discrete_results`.  In words: every unit has a treatment for
each level of ``Z`` and an outcome for each pair (treatment, ``Z``); ``Z`` is randomised; the
budget ``ε`` caps the share of units whose outcome ``Z`` changes for some treatment level.  The
effect of treatment level ``c`` against the base (lowest) level is

.. math::

    \theta_c = \sum_z P(z)\, E[Y(c, z) - Y(0, z)],

the average effect with ``Z``'s own effect held at its observed distribution.  At ``ε = 0`` the
bounds are those of Balke & Pearl (1997).  Falsification: Pearl's (1995) instrumental
inequality, :math:`\max_x \sum_y \max_z P(y, x \mid z) \le 1`, and the smallest budget at which
the model fits the data at all.

Examples
--------
>>> from sensiv.partial_id.discrete_data import from_counts
>>> table = from_counts([[[60, 30], [4, 6]], [[25, 15], [30, 30]]])
>>> result = discrete_bounds(table, budget=0.0, reps=0, points=3)
>>> str(result.bounds)
'[-0.1, 0.4]'
>>> result.inequality.holds, result.min_budget
(True, 0.0)
"""

from __future__ import annotations

import math

import numpy as np

from sensiv.core.errors import InputError
from sensiv.core.limits import check_seed
from sensiv.core.progress import Progress
from sensiv.core.results import Interval
from sensiv.estimation.inference import imbens_manski
from sensiv.partial_id.discrete_data import CountsTable, plain_number
from sensiv.partial_id.discrete_programme import Programmes, curve
from sensiv.partial_id.discrete_results import (CAUTION, Bootstrap, ContrastBounds,
                                                CurvePoint, DiscreteBounds,
                                                InstrumentalInequality)
from sensiv.partial_id.discrete_types import Enumeration

__all__ = ["CAUTION", "Bootstrap", "ContrastBounds", "CurvePoint", "DiscreteBounds",
           "InstrumentalInequality", "discrete_bounds", "instrumental_inequality"]

DEFAULT_BUDGET = 0.1
DEFAULT_POINTS = 51
DEFAULT_REPS = 999
MIN_REPS = 10
MAX_POINTS = 10_001
CURVE_FLOOR = 0.1
"""The curve runs at least to this budget ..."""
CURVE_MARGIN = 1.25
"""... and this far beyond the smallest fitting budget and the breakdown budget."""
INEQUALITY_TOLERANCE = 1e-12  # round-off of shares computed from counts


# --------------------------------------------------------------------------- computations
def instrumental_inequality(counts: np.ndarray, treatment_levels) -> InstrumentalInequality:
    r"""Pearl's (1995) instrumental inequality :math:`\max_x \sum_y \max_z P(y, x \mid z)
    \le 1` from counts ``[z, x, y]`` (every level of ``z`` non-empty)."""
    counts = np.asarray(counts, dtype=np.float64)
    shares = counts / counts.sum(axis=(1, 2))[:, None, None]
    per_x = shares.max(axis=0).sum(axis=1)
    worst = int(np.argmax(per_x))
    value = float(per_x[worst])
    return InstrumentalInequality(value, value <= 1.0 + INEQUALITY_TOLERANCE,
                                  float(treatment_levels[worst]))


def _check_share(value, name: str, option: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)) \
            or not 0.0 <= float(value) <= 1.0:
        raise InputError(
            f"{name} ({option}) must be a share between 0 and 1; got {value!r}: pass e.g. "
            f"{option} 0.1 (0 imposes the restriction exactly)"
        )
    return float(value)


def _check_int(value, name: str, option: str, low: int, high: int, extra: str = "") -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) \
            or not low <= value <= high:
        raise InputError(f"{name} ({option}) must be a whole number from {low} to {high}"
                         f"{extra}; got {value!r}")
    return int(value)


def _check_options(table, budget, monotone, defier_budget, threshold, reps, seed, points,
                   max_budget, confidence_level) -> None:
    if not isinstance(table, CountsTable):
        raise InputError("table must be a CountsTable (see sensiv.partial_id.discrete_data: "
                         f"tabulate, counts_from_frame, read_counts); got {type(table).__name__}")
    _check_share(budget, "budget", "--budget")
    _check_share(defier_budget, "defier budget", "--defier-budget")
    if defier_budget > 0 and not monotone:
        raise InputError(f"a defier budget ({defier_budget:g}) only has a meaning under "
                         "monotonicity; add --monotone (monotone=True) or drop the defier budget")
    if isinstance(threshold, bool) or not isinstance(
            threshold, (int, float, np.integer, np.floating)) or not math.isfinite(threshold):
        raise InputError(f"threshold (--threshold) must be a finite number; got {threshold!r}")
    if reps != 0:
        _check_int(reps, "reps", "--reps", MIN_REPS, 10**7, " (or 0 for no bootstrap)")
    if seed is not None:
        check_seed(seed)
    _check_int(points, "points", "--points", 2, MAX_POINTS)
    if max_budget is not None and (_check_share(max_budget, "max budget", "--max-budget")
                                   == 0.0):
        raise InputError("max budget (--max-budget) must be above 0 for a curve; got 0")
    if isinstance(confidence_level, bool) or not isinstance(
            confidence_level, (int, float, np.integer, np.floating)) \
            or not 0.0 < confidence_level < 1.0:
        raise InputError(f"confidence level (--level) must lie in (0, 1); got "
                         f"{confidence_level!r}: pass e.g. --level 0.95")


def _curve_end(budget: float, min_budget: float | None, breakdowns) -> float:
    ends = [budget, CURVE_FLOOR]
    ends += [CURVE_MARGIN * b for b in (min_budget, *breakdowns) if b is not None]
    return min(1.0, max(ends))


def _bootstrap(programmes: Programmes, counts: np.ndarray, budget: float, defiers: float,
               reps: int, seed: int, progress: bool):
    """Replicate bounds ``(reps, contrasts, 2)`` (NaN where unavailable) and the tallies."""
    K, J, L = counts.shape
    rng = np.random.default_rng(seed)
    n = int(counts.sum())
    shares = counts.ravel() / n
    out = np.full((reps, J - 1, 2), np.nan)
    infeasible = skipped = 0
    bar = Progress(reps, label="bootstrap", enabled=progress)
    try:
        for r in range(reps):
            draw = rng.multinomial(n, shares).reshape(K, J, L)
            if (draw.sum(axis=(1, 2)) == 0).any():
                skipped += 1
            else:
                programmes.set_data(draw)
                for c in range(1, J):
                    pair = programmes.interval(c, budget, defiers)
                    if pair is None:
                        infeasible += 1
                        break
                    out[r, c - 1] = pair
            bar.update(r + 1)
    finally:
        bar.close()
        programmes.set_data(counts)
    return out, infeasible, skipped


def discrete_bounds(table: CountsTable, budget: float = DEFAULT_BUDGET, *,
                    monotone: bool = False, defier_budget: float = 0.0,
                    threshold: float = 0.0, reps: int = DEFAULT_REPS, seed: int | None = None,
                    points: int = DEFAULT_POINTS, max_budget: float | None = None,
                    confidence_level: float = 0.95, enumeration: Enumeration = "reduced",
                    progress: bool = True) -> DiscreteBounds:
    r"""Bounds on the treatment effect with a budget ``ε`` for exclusion violations.

    Parameters
    ----------
    table : CountsTable
        Counts ``n[z, x, y]``: 2–4 instrument, 2–3 treatment and 2–4 outcome levels.
    budget : float in [0, 1]
        ``ε``: largest share of units whose outcome the instrument changes directly.
    monotone : bool
        Assume no defiers: the treatment never falls as ``Z`` moves up its sorted levels ...
    defier_budget : float in [0, 1]
        ... except for at most this share of units (only with ``monotone``).
    threshold : float
        ``θ₀`` for the breakdown budget: the smallest ``ε`` whose bounds contain it.
    reps : int
        Bootstrap replicates (multinomial resampling of the counts); 0 for none.
    seed : int or None
        Seed of the bootstrap; ``None`` draws one, which is reported.
    points : int
        Number of budgets on the curve, evenly spaced from 0 to ``max_budget``.
    max_budget : float or None
        End of the curve; by default the largest of ``budget``, 0.1 and 1.25 times the smallest
        fitting budget and the breakdown budget, at most 1.
    confidence_level : float
        Level of the Imbens & Manski (2004) interval.
    enumeration : {"reduced", "full"}
        Programme encoding; both give the same bounds, ``"full"`` (every response type a
        variable) only exists to check the reduction on small tables.
    progress : bool
        Show a progress line on a terminal during long bootstraps.

    Returns
    -------
    DiscreteBounds
        Bounds ``[L(ε), U(ε)]`` at ``budget`` (``None`` when the model does not fit the data
        there), their bootstrap standard errors and Imbens–Manski interval, the curve over
        ``ε``, the breakdown budget, the smallest fitting budget and the instrumental
        inequality.

    Raises
    ------
    InputError
        An option out of range or a defier budget without monotonicity.
    """
    _check_options(table, budget, monotone, defier_budget, threshold, reps, seed, points,
                   max_budget, confidence_level)
    budget, defier_budget = float(budget), float(defier_budget)
    threshold, confidence_level = float(threshold), float(confidence_level)
    J = table.shape[1]
    # Without monotonicity the defier cap is set to 1, where it binds nothing.
    defiers = defier_budget if monotone else 1.0
    programmes = Programmes(table.shape, table.outcome_levels, enumeration=enumeration)
    programmes.set_data(table.counts)
    inequality = instrumental_inequality(table.counts, table.treatment_levels)
    min_budget = programmes.min_budget(defiers)
    min_defiers = programmes.min_defiers() if monotone else None

    contrasts = range(1, J)
    estimates = {c: programmes.interval(c, budget, defiers) for c in contrasts}
    breakdowns = {c: programmes.breakdown(c, threshold, defiers) for c in contrasts}
    end = max_budget if max_budget is not None else _curve_end(
        budget, min_budget, breakdowns.values())
    curves = _curves(programmes, contrasts, np.linspace(0.0, end, points), defiers, min_budget)
    fits = estimates[J - 1] is not None
    notes = _fit_notes(table, budget, monotone, defier_budget, min_budget, min_defiers,
                       inequality, fits)
    boot, spreads = _inference(programmes, table, budget, defiers, reps, seed, progress, notes,
                               fits)
    results = _contrasts(table, estimates, spreads, curves, breakdowns, confidence_level)
    return DiscreteBounds(table, budget, bool(monotone), defier_budget, threshold,
                          confidence_level, results, min_budget, min_defiers,
                          inequality, boot, tuple(notes))


def _curves(programmes: Programmes, contrasts, grid: np.ndarray, defiers: float,
            min_budget: float | None) -> dict[int, tuple[CurvePoint, ...]]:
    """The bounds of each contrast on the grid of budgets."""
    return {c: tuple(CurvePoint(float(e), _interval(pair)) for e, pair in
                     zip(grid, curve(programmes, c, grid, defiers, min_budget)))
            for c in contrasts}


def _contrasts(table: CountsTable, estimates, spreads, curves, breakdowns,
               confidence_level: float) -> tuple[ContrastBounds, ...]:
    """One :class:`ContrastBounds` per treatment level above the base, with its interval."""
    results = []
    for c, pair in estimates.items():
        bounds, se, ci = _interval(pair), spreads[c], None
        if bounds is not None and se is not None:
            ci = imbens_manski(bounds.low, bounds.high, *se, confidence_level)
        results.append(ContrastBounds(float(table.treatment_levels[c]),
                                      float(table.treatment_levels[0]), bounds, se, ci,
                                      curves[c], breakdowns[c]))
    return tuple(results)


def _inference(programmes, table, budget, defiers, reps, seed, progress, notes, fits: bool):
    """Bootstrap tallies and the standard errors ``(se_lower, se_upper)`` per contrast
    (``None`` with fewer than 2 usable replicates); notes are appended to ``notes``.

    No bootstrap (``(None, {contrast: None})``) when ``reps`` is 0 or the model does not fit
    the data at ``budget`` (``fits`` false).
    """
    J = table.shape[1]
    if not (reps and fits):
        if reps:
            notes.append("no confidence interval: the model does not fit the data at this "
                         "budget")
        return None, {c: None for c in range(1, J)}
    seed = int(np.random.SeedSequence().entropy % 2**32) if seed is None else int(seed)
    replicates, infeasible, skipped = _bootstrap(programmes, table.counts, budget, defiers,
                                                 reps, seed, progress)
    usable = np.isfinite(replicates[:, 0, 0])
    used = int(usable.sum())
    if infeasible:
        notes.append(f"{infeasible} of {reps} bootstrap replicates do not fit the model at "
                     f"budget {budget:g}; standard errors use the {used} that do")
    if skipped:
        notes.append(f"{skipped} of {reps} bootstrap replicates left a level of "
                     f"{table.instrument} empty and were skipped")
    spreads = {}
    for c in range(1, J):
        ok = replicates[usable, c - 1]
        spreads[c] = ((float(ok[:, 0].std(ddof=1)), float(ok[:, 1].std(ddof=1)))
                      if used >= 2 else None)
    if used < 2:
        notes.append("no confidence interval: fewer than 2 bootstrap replicates fit the model")
    return Bootstrap(reps, seed, used, infeasible, skipped), spreads


def _interval(pair: tuple[float, float] | None) -> Interval | None:
    if pair is None:
        return None
    low, high = pair
    # The two ends come from one solve; at a point-identified budget round-off can cross them.
    return Interval(min(low, high), max(low, high))


def _fit_notes(table, budget, monotone, defier_budget, min_budget, min_defiers,
               inequality, fits: bool) -> list[str]:
    """Whether the model fits the data: the instrumental inequality, the smallest fitting
    budget and a solve that missed a fit on the edge of it (``fits`` false)."""
    notes = []
    if not inequality.holds:
        notes.append(
            f"the instrumental inequality fails (max over {table.treatment} of sum over "
            f"{table.outcome} of max over {table.instrument} of P(y, x | z) = "
            f"{inequality.value:.4g} > 1, at {table.treatment} = "
            f"{plain_number(inequality.treatment_level)}): the data contradict the exclusion "
            "restriction for a randomised instrument (sampling noise aside)")
    if min_budget is None:
        notes.append(
            f"the model does not fit the data at any budget: monotonicity allows a defier "
            f"share of at most {defier_budget:g}, but the data need at least "
            f"{min_defiers:.4g}; raise --defier-budget or drop --monotone")
    elif budget < min_budget:
        notes.append(
            f"the model does not fit the data at budget {budget:g}: the smallest budget that "
            f"fits is {min_budget:.4g}, so the bounds are empty here (a finding, not an error)")
    elif min_budget > 0:
        notes.append(f"the exclusion restriction alone does not fit the data: the smallest "
                     f"budget that fits is {min_budget:.4g}")
    if not fits and min_budget is not None and budget >= min_budget:
        notes.append(f"the solver found no fit at budget {budget:g}, on the edge of the "
                     f"smallest fitting budget {min_budget:.6g}; raise the budget slightly")
    return notes


