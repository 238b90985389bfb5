r"""Bounds on the effect of a discrete treatment when a randomised discrete instrument may
change the outcome directly, with a budget on how many units it does so for.

The model and its programmes are in :mod:`sensiv.partial_id.discrete_programme`; the counts
tables in :mod:`sensiv.partial_id.discrete_data`.  In words: every unit has a treatment for
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
from dataclasses import dataclass, field

import numpy as np

from sensiv.errors import InputError
from sensiv.partial_id.discrete_data import CountsTable, _plain
from sensiv.partial_id.discrete_programme import Enumeration, Programmes
from sensiv.results import Interval, format_number, json_number

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

CAUTION = ("Caution: these bounds hold only under the stated assumptions — a randomised "
           "instrument and at most the stated share of units whose outcome the instrument "
           "changes directly (and, if assumed, the monotonicity of the treatment in the "
           "instrument). A model that fits the data, or an instrumental inequality that holds, "
           "does not prove the instrument valid.")


# --------------------------------------------------------------------------- results
@dataclass(frozen=True, slots=True)
class InstrumentalInequality:
    """Pearl's (1995) inequality: ``value = max_x Σ_y max_z P(y, x | z)``, which a valid
    instrument keeps at or below 1; ``treatment_level`` is the maximising ``x``."""

    value: float
    holds: bool
    treatment_level: float

    def to_dict(self) -> dict:
        return {"value": self.value, "holds": self.holds,
                "treatment_level": _plain(self.treatment_level)}


@dataclass(frozen=True, slots=True)
class CurvePoint:
    """Bounds at one budget; ``bounds`` is ``None`` where the model does not fit the data."""

    budget: float
    bounds: Interval | None

    def to_dict(self) -> dict:
        low, high = self.bounds.to_list() if self.bounds is not None else (None, None)
        return {"budget": self.budget, "lower": low, "upper": high}


@dataclass(frozen=True, slots=True)
class ContrastBounds:
    """Bounds on ``E[Y(level) − Y(base)]`` (averaged over ``P(z)``) with their inference."""

    level: float
    base: float
    bounds: Interval | None
    se: tuple[float, float] | None
    ci: Interval | None
    curve: tuple[CurvePoint, ...]
    breakdown_budget: float | None

    def to_dict(self) -> dict:
        return {
            "level": _plain(self.level),
            "base": _plain(self.base),
            "bounds": self.bounds.to_list() if self.bounds is not None else None,
            "se": [json_number(s) for s in self.se] if self.se is not None else None,
            "ci": self.ci.to_list() if self.ci is not None else None,
            "curve": [point.to_dict() for point in self.curve],
            "breakdown_budget": self.breakdown_budget,
        }


@dataclass(frozen=True, slots=True)
class Bootstrap:
    """Multinomial bootstrap of the counts: ``used`` replicates gave bounds, ``infeasible``
    ones did not fit the model at the budget, ``skipped`` ones left a level of ``Z`` empty."""

    reps: int
    seed: int
    used: int
    infeasible: int
    skipped: int

    def to_dict(self) -> dict:
        return {"reps": self.reps, "seed": self.seed, "used": self.used,
                "infeasible": self.infeasible, "skipped": self.skipped}


@dataclass(frozen=True, slots=True)
class DiscreteBounds:
    """Result of :func:`discrete_bounds`.

    ``bounds``, ``ci``, ``curve`` and ``breakdown_budget`` describe the focus contrast: the
    highest treatment level against the lowest (the only one for a binary treatment);
    ``contrasts`` holds every level against the lowest.
    """

    table: CountsTable
    budget: float
    monotone: bool
    defier_budget: float
    threshold: float
    confidence_level: float
    contrasts: tuple[ContrastBounds, ...]
    min_budget: float | None
    min_defier_budget: float | None
    inequality: InstrumentalInequality
    bootstrap: Bootstrap | None
    notes: tuple[str, ...] = field(default=())

    @property
    def focus(self) -> ContrastBounds:
        return self.contrasts[-1]

    @property
    def bounds(self) -> Interval | None:
        return self.focus.bounds

    @property
    def ci(self) -> Interval | None:
        return self.focus.ci

    @property
    def curve(self) -> tuple[CurvePoint, ...]:
        return self.focus.curve

    @property
    def breakdown_budget(self) -> float | None:
        return self.focus.breakdown_budget

    @property
    def caution(self) -> str:
        return CAUTION

    def estimand(self) -> str:
        t, c = self.table, self.focus
        z = t.instrument
        return (f"sum over k of P({z}=k) * E[{t.outcome}({t.treatment}={_plain(c.level)}, "
                f"{z}=k) - {t.outcome}({t.treatment}={_plain(c.base)}, {z}=k)]")

    def assumptions(self) -> list[str]:
        t = self.table
        z_order = " < ".join(str(_plain(v)) for v in t.instrument_levels)
        out = [
            f"{t.instrument} is randomised: independent of every unit's potential treatments "
            "and potential outcomes",
            f"exclusion relaxed by a budget: at most a share {self.budget:g} of units have an "
            f"outcome that {t.instrument} changes directly for some level of {t.treatment} "
            "(0 would be the exclusion restriction)",
            f"the effect averages {t.instrument}'s direct effect over its observed "
            f"distribution: {self.estimand()}",
        ]
        if tuple(t.outcome_levels) != (0.0, 1.0):
            levels = ", ".join(str(_plain(v)) for v in t.outcome_levels)
            out.append(f"{t.outcome}'s levels ({levels}) are taken as numbers: the effect is "
                       f"on the mean of {t.outcome}, and {t.outcome} takes no other values")
        if self.monotone:
            out.append(f"monotonicity: {t.treatment} never falls as {t.instrument} moves up "
                       f"the order {z_order}, except for at most a share "
                       f"{self.defier_budget:g} of units (defiers)")
        out.append("units are independent draws from the population; the confidence interval "
                   "comes from a multinomial bootstrap of the counts and is approximate "
                   "(bounds are maxima of linear functions of the data, where the bootstrap "
                   "can under-cover when two of them nearly tie)")
        return out

    def to_dict(self) -> dict:
        focus = self.focus.to_dict()
        return {
            "bounds": focus["bounds"],
            "ci": focus["ci"],
            "se": focus["se"],
            "curve": focus["curve"],
            "breakdown_budget": focus["breakdown_budget"],
            "min_budget": self.min_budget,
            "inequality_holds": self.inequality.holds,
            "instrumental_inequality": self.inequality.to_dict(),
            "contrast": {"level": focus["level"], "base": focus["base"]},
            "contrasts": [c.to_dict() for c in self.contrasts],
            "estimand": self.estimand(),
            "budget": self.budget,
            "monotone": self.monotone,
            "defier_budget": self.defier_budget if self.monotone else None,
            "min_defier_budget": self.min_defier_budget,
            "threshold": self.threshold,
            "confidence_level": self.confidence_level,
            "bootstrap": self.bootstrap.to_dict() if self.bootstrap is not None else None,
            "data": self.table.to_dict(),
            "notes": list(self.notes),
            "assumptions": self.assumptions(),
            "caution": CAUTION,
        }

    def __str__(self) -> str:
        return summary(self)


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
        _check_int(seed, "seed", "--seed", 0, 2**63 - 1)
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
    from sensiv.inference import Progress

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
        Counts ``n[z, x, y]``: 2–4 instrument levels, 2–3 treatment levels, 2–4 outcome levels.
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
    K, J, L = table.shape
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
    grid = np.linspace(0.0, end, points)
    curves = {c: tuple(CurvePoint(float(e), _interval(programmes.interval(c, e, defiers)))
                       for e in grid) for c in contrasts}

    notes = _fit_notes(table, budget, monotone, defier_budget, min_budget, min_defiers,
                       inequality)
    boot = None
    replicates = np.full((0, J - 1, 2), np.nan)
    if reps and estimates[1] is not None:
        seed = int(np.random.SeedSequence().entropy % 2**32) if seed is None else int(seed)
        replicates, infeasible, skipped = _bootstrap(programmes, table.counts, budget,
                                                     defiers, reps, seed, progress)
        used = int(np.isfinite(replicates[:, 0, 0]).sum())
        boot = Bootstrap(reps, seed, used, infeasible, skipped)
        if infeasible:
            notes.append(f"{infeasible} of {reps} bootstrap replicates do not fit the model at "
                         f"budget {budget:g}; standard errors use the {used} that do")
        if skipped:
            notes.append(f"{skipped} of {reps} bootstrap replicates left a level of "
                         f"{table.instrument} empty and were skipped")
    elif reps:
        notes.append("no confidence interval: the model does not fit the data at this budget")

    results = []
    for c in contrasts:
        bounds = _interval(estimates[c])
        se = ci = None
        if bounds is not None and boot is not None:
            ok = replicates[np.isfinite(replicates[:, c - 1, 0]), c - 1]
            if len(ok) >= 2:
                from sensiv.inference import imbens_manski

                se = (float(ok[:, 0].std(ddof=1)), float(ok[:, 1].std(ddof=1)))
                ci = imbens_manski(bounds.low, bounds.high, *se, confidence_level)
            elif c == J - 1:
                notes.append("no confidence interval: fewer than 2 bootstrap replicates fit "
                             "the model")
        results.append(ContrastBounds(float(table.treatment_levels[c]),
                                      float(table.treatment_levels[0]), bounds, se, ci,
                                      curves[c], breakdowns[c]))
    return DiscreteBounds(table, budget, bool(monotone), defier_budget, threshold,
                          confidence_level, tuple(results), min_budget, min_defiers,
                          inequality, boot, tuple(notes))


def _interval(pair: tuple[float, float] | None) -> Interval | None:
    if pair is None:
        return None
    low, high = pair
    # The two ends come from one solve; at a point-identified budget round-off can cross them.
    return Interval(min(low, high), max(low, high))


def _fit_notes(table, budget, monotone, defier_budget, min_budget, min_defiers,
               inequality) -> list[str]:
    notes = []
    if not inequality.holds:
        notes.append(
            f"the instrumental inequality fails (max over {table.treatment} of sum over "
            f"{table.outcome} of max over {table.instrument} of P(y, x | z) = "
            f"{inequality.value:.4g} > 1, at {table.treatment} = "
            f"{_plain(inequality.treatment_level)}): the data contradict the exclusion "
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
    return notes


# --------------------------------------------------------------------------- text summary
def summary(result: DiscreteBounds) -> str:
    """Readable plain-text report of a :class:`DiscreteBounds` result."""
    t = result.table
    pct = f"{100 * result.confidence_level:g}%"
    levels = " / ".join(
        f"{name} {{{', '.join(str(_plain(v)) for v in values)}}}"
        for name, values in ((t.instrument, t.instrument_levels),
                             (t.treatment, t.treatment_levels),
                             (t.outcome, t.outcome_levels)))
    lines = [
        f"Discrete bounds: effect of {t.treatment} on {t.outcome}, instrument {t.instrument}",
        f"Data: {t.description}, n = {t.n} ({t.n_dropped} rows dropped for missing values); "
        f"levels {levels}",
        f"Estimand: {result.estimand()}",
        f"Budget for direct effects of {t.instrument}: {result.budget:g}"
        + (f"; monotone, defier budget {result.defier_budget:g}" if result.monotone else ""),
        "",
    ]
    header = f"{'contrast':<12}{'bounds':>26}{pct + ' CI':>26}{'breakdown budget':>20}"
    lines.append(header)
    for c in result.contrasts:
        bounds = str(c.bounds) if c.bounds is not None else "empty (no fit)"
        ci = str(c.ci) if c.ci is not None else "n/a"
        breakdown = format_number(c.breakdown_budget) if c.breakdown_budget is not None \
            else "never"
        lines.append(f"{f'{_plain(c.level)} vs {_plain(c.base)}':<12}{bounds:>26}{ci:>26}"
                     f"{breakdown:>20}")
    ineq = result.inequality
    lines += [
        "",
        f"Breakdown: smallest budget whose bounds contain {result.threshold:g}.",
        f"Instrumental inequality (Pearl 1995): {ineq.value:.4g} "
        f"{'<=' if ineq.holds else '>'} 1, {'holds' if ineq.holds else 'FAILS'}.",
        "Smallest budget that fits the data: "
        + (format_number(result.min_budget) if result.min_budget is not None else "none"),
    ]
    if result.min_defier_budget is not None:
        lines.append(f"Smallest defier share that fits the data: "
                     f"{format_number(result.min_defier_budget)}")
    if result.bootstrap is not None:
        b = result.bootstrap
        lines.append(f"Bootstrap: {b.reps} replicates (seed {b.seed}), {b.used} used, "
                     f"{b.infeasible} without a fit, {b.skipped} skipped.")
    lines += ["", "Curve (focus contrast):", f"{'budget':>10}{'lower':>12}{'upper':>12}"]
    step = max(1, (len(result.curve) - 1) // 10)
    shown = list(result.curve[::step])
    if shown[-1] is not result.curve[-1]:
        shown.append(result.curve[-1])
    for point in shown:
        low, high = ((format_number(point.bounds.low), format_number(point.bounds.high))
                     if point.bounds is not None else ("no fit", "no fit"))
        lines.append(f"{format_number(point.budget):>10}{low:>12}{high:>12}")
    lines += [f"Note: {note}" for note in result.notes]
    lines += ["", "Assumptions:"] + [f"- {a}" for a in result.assumptions()]
    lines += ["", CAUTION]
    return "\n".join(lines)
