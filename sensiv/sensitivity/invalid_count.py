r"""Breakdown in the count of invalid instruments: how many may have any direct effect at all.

Allowing instrument *j* an unrestricted direct effect makes its association uninformative about
β, so it drops out of the IVW estimate.  For a kept set ``K`` the IVW estimate with the
(fixed) weights ``w_j`` (first-order by default) and its **fixed-effect** standard error are
``Σ_K a / Σ_K b`` and ``(Σ_K b)^{-1/2}`` with ``a_j = w_j θ_j`` (first order:
``b_x b_y s_y^{-2}``) and ``b_j = w_j`` (``b_x² s_y^{-2}``).  With ``c_j = a_j − θ b_j`` the
conclusion "lower end > θ" holds on ``K`` iff

.. math::

    f(x) = c'x - z\sqrt{b'x} > 0, \qquad x = 1_K \in \{0, 1\}^J

(conclusion "upper end < θ": ``c`` replaced by ``−c``, the mirror image).  The breakdown count
``s*`` is the largest ``s`` such that **every** choice of at most ``s`` dropped instruments keeps
the conclusion; so ``s* = k_min − 1`` with ``k_min`` the fewest drops that give ``f ≤ 0`` (the
empty set counts as failing: no interval).  ``f`` is convex in ``x`` (``−√·`` is convex), and a
sort of the ``c_j`` or ``c_j/b_j`` does not find the worst set in general.

Method (exact, finite): minimise ``Σ d_j`` over ``d = 1 − x ∈ \{0,1\}^J`` subject to the outer
approximation ``c'x − z(√B_k + (b'x − B_k)/(2√B_k)) ≤ 0`` for tangent points ``B_k`` (a tangent
of the concave ``√`` lies above it, so every truly failing ``x`` satisfies every cut: the
programme's optimum is a lower bound on ``k_min``).  Each mixed-integer linear programme is
solved by HiGHS (``scipy.optimize.milp``, relative gap 0, presolve off: on these dense rows
HiGHS's presolve takes seconds and does not heed the time limit); when its solution truly
fails it is optimal, otherwise the tangent at its ``B = b'x`` is added (Kelley's cutting
planes), or, if that point was cut at already, a no-good cut that removes that one ``x``.  A
greedy sequence of drops gives an upper bound from the start, and one sort a certified lower
bound (:func:`sorted_bound`); when they meet no programme is solved.  With an iteration or time
limit the result says ``exact = false`` and reports the certified count (the largest ``s``
proven safe, ``LB − 1``), the upper bound and the gap.  Coefficients are scaled by ``Σb``
(``b'x ∈ [0, 1]``).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numpy as np

from sensiv.core.errors import InputError
from sensiv.core.results import json_number
from sensiv.estimation import distributions as dist
from sensiv.sensitivity.associations import Associations, WeightOrder, ivw
from sensiv.sensitivity.bounds import conclusion_text

METHOD = "MILP outer approximation (Kelley cutting planes, HiGHS via scipy.optimize.milp)"
METHOD_BOUNDS = "a one-sort lower bound met a greedy set of drops (no programme needed)"
MAX_ITERATIONS = 200
TIME_LIMIT = 60.0           # seconds over all programmes
INITIAL_TANGENTS = 12       # tangent points spread geometrically over (0, 1]
CAUTION = ("Caution: the invalid-count breakdown holds only for the IVW estimate with its "
           "fixed-effect standard error and independent instruments; it counts instruments "
           "dropped whichever they are, and does not prove that the others are valid.")


@dataclass(frozen=True, slots=True)
class InvalidCount:
    """The largest number ``count`` of instruments that may be invalid (any direct effect,
    whichever they are) with the conclusion kept; ``share = count / instruments``.

    ``count`` is ``None`` when the IVW interval of all instruments already contains the
    threshold.  Without ``exact`` it is the certified count (proven safe) and ``upper`` the
    largest count not excluded; ``gap = upper − count``.  ``worst`` names ``count + 1``
    instruments whose removal breaks the conclusion (when such a set was found).
    """

    count: int | None
    share: float | None
    instruments: int
    exact: bool
    upper: int | None
    gap: int
    worst: tuple[str, ...]
    threshold: float
    conclusion: str
    confidence_level: float
    order: str
    iterations: int
    method: str = METHOD

    def assumptions(self) -> list[str]:
        return ["an instrument allowed a direct effect is dropped; the others have none",
                f"IVW estimate with {self.order}-order weights and its fixed-effect standard "
                f"error from the kept instruments ({100 * self.confidence_level:g}% interval)",
                "associations approximately normal and independent across instruments"]

    def to_dict(self) -> dict:
        return {"count": self.count, "share": json_number(self.share),
                "instruments": self.instruments, "exact": self.exact,
                "certified": self.count, "upper": self.upper, "gap": self.gap,
                "worst": list(self.worst), "threshold": self.threshold,
                "conclusion": self.conclusion, "se_rule": "fixed", "weights": self.order,
                "confidence_level": self.confidence_level, "iterations": self.iterations,
                "method": self.method, "assumptions": self.assumptions(), "caution": CAUTION}


@dataclass(frozen=True, slots=True)
class Problem:
    """The scaled problem: kept iff ``c'x − z√(b'x) > 0`` with ``Σb = 1``."""

    c: np.ndarray
    b: np.ndarray
    z: float

    def value(self, kept: np.ndarray) -> float:
        return float(self.c @ kept - self.z * math.sqrt(max(float(self.b @ kept), 0.0)))


def problem_of(assoc: Associations, threshold: float, confidence_level: float,
               order: WeightOrder) -> tuple[Problem | None, str]:
    """The scaled :class:`Problem` on the side of the conclusion, and the conclusion in
    words (``None`` when there is none)."""
    fit = ivw(assoc, order, confidence_level)
    words = conclusion_text("exposure", fit.ci_fixed, threshold, False)
    if fit.ci_fixed.contains(threshold):
        return None, words
    side = 1.0 if fit.ci_fixed.low > threshold else -1.0
    b = fit.weights
    a = b * assoc.ratios
    total = float(b.sum())
    c = side * (a - threshold * b) / math.sqrt(total)
    z = dist.normal_quantile(0.5 + confidence_level / 2.0)
    return Problem(c, b / total, z), words


def greedy_drops(problem: Problem, dropped: np.ndarray | None = None) -> np.ndarray:
    """Drop, one at a time (after ``dropped``), the instrument whose removal lowers ``f``
    most, until ``f ≤ 0``; the dropped indicator (an upper bound on ``k_min``)."""
    kept = np.ones(problem.c.size) if dropped is None else 1.0 - dropped
    while problem.value(kept) > 0.0:
        ck, bk = float(problem.c @ kept), float(problem.b @ kept)
        trial = (ck - problem.c) - problem.z * np.sqrt(np.maximum(bk - problem.b, 0.0))
        trial[kept == 0.0] = np.inf
        kept[int(np.argmin(trial))] = 0.0
    return 1.0 - kept


def sorted_bound(problem: Problem) -> int:
    """A certified lower bound on ``k_min`` by one sort: dropping any ``k`` instruments leaves
    ``c'x ≥ Σc − (k largest c_j)`` and ``b'x ≤ 1 − (k smallest b_j)``, so while
    ``Σc − top_k(c) − z√(1 − bottom_k(b)) > 0`` every set of ``k`` drops keeps the conclusion."""
    top = np.concatenate([[0.0], np.cumsum(np.sort(problem.c)[::-1])])
    low = np.concatenate([[0.0], np.cumsum(np.sort(problem.b))])
    worst = problem.c.sum() - top - problem.z * np.sqrt(np.maximum(1.0 - low, 0.0))
    failing = np.flatnonzero(worst <= 0.0)
    return int(failing[0]) if failing.size else problem.c.size


def _tangent_row(problem: Problem, point: float) -> tuple[np.ndarray, float]:
    """The cut at ``B_k = point`` written in the drops ``d``: ``row @ d ≤ rhs``."""
    g = problem.z / (2.0 * math.sqrt(point))
    coef = problem.c - g * problem.b
    return -coef, problem.z * math.sqrt(point) / 2.0 - float(coef.sum())


def _solve(rows: list[np.ndarray], rhs: list[float], size: int, seconds: float):
    from scipy.optimize import Bounds, LinearConstraint, milp

    res = milp(np.ones(size), constraints=[LinearConstraint(np.array(rows), -np.inf,
                                                            np.array(rhs))],
               integrality=np.ones(size), bounds=Bounds(0.0, 1.0),
               options={"time_limit": max(seconds, 0.01), "mip_rel_gap": 0.0, "disp": False,
                        "presolve": False})
    bound = getattr(res, "mip_dual_bound", None)
    if res.status == 0:
        bound = res.fun if bound is None or not math.isfinite(bound) else max(bound, res.fun)
    low = int(math.ceil(float(bound) - 1e-6)) if bound is not None and math.isfinite(bound) else 0
    x = None if res.x is None else np.round(res.x)
    return res.status, x, low


def min_drops(problem: Problem, max_iterations: int = MAX_ITERATIONS,
              time_limit: float = TIME_LIMIT) -> tuple[int, int, np.ndarray, int]:
    """``(lower, upper, witness, iterations)`` for ``k_min`` (module docstring); exact when
    ``lower == upper``; ``witness`` the drops of a failing set of size ``upper``."""
    start = time.monotonic()
    witness = greedy_drops(problem)
    upper, lower = int(witness.sum()), max(1, sorted_bound(problem))
    rows, rhs, points = [], [], []
    for point in np.geomspace(max(float(problem.b.min()), 1e-12), 1.0, INITIAL_TANGENTS):
        row, r = _tangent_row(problem, float(point))
        rows.append(row)
        rhs.append(r)
        points.append(float(point))
    iterations = 0
    while lower < upper and iterations < max_iterations:
        left = time_limit - (time.monotonic() - start)
        if left <= 0.0:
            break
        iterations += 1
        status, d, bound = _solve(rows, rhs, problem.c.size, left)
        lower = max(lower, bound)
        if d is None or status != 0:
            break
        kept = 1.0 - d
        if problem.value(kept) <= 0.0:
            if int(d.sum()) < upper:
                upper, witness = int(d.sum()), d
            lower = max(lower, int(d.sum()))
            break
        full = greedy_drops(problem, d)
        if int(full.sum()) < upper:
            upper, witness = int(full.sum()), full
        point = float(problem.b @ kept)
        if any(abs(point - p) <= 1e-12 * max(point, 1e-300) for p in points):
            rows.append(np.where(d > 0.5, -1.0, 1.0))       # no-good cut: Σ_{d=1}(1−d)+Σ_{d=0}d ≥ 1
            rhs.append(float(d.sum()) - 1.0)
        else:
            row, r = _tangent_row(problem, point)
            rows.append(row)
            rhs.append(r)
            points.append(point)
    return min(lower, upper), upper, witness, iterations


def invalid_count(assoc: Associations, *, threshold: float = 0.0,
                  confidence_level: float = 0.95, order: WeightOrder = "first",
                  max_iterations: int = MAX_ITERATIONS,
                  time_limit: float = TIME_LIMIT) -> InvalidCount:
    """The invalid-count breakdown of the IVW conclusion at ``threshold`` (module docstring).

    Examples
    --------
    >>> from sensiv.sensitivity.associations import check_associations
    >>> a = check_associations(first_stage=[0.1] * 4, first_stage_se=[0.01] * 4,
    ...                        reduced_form=[0.05] * 4, reduced_form_se=[0.01] * 4)
    >>> r = invalid_count(a)
    >>> r.count, r.exact
    (3, True)
    """
    if not math.isfinite(threshold):
        raise InputError(f"threshold {threshold} must be a finite number")
    if not 0.0 < confidence_level < 1.0:
        raise InputError(f"confidence level {confidence_level} is outside (0, 1); give e.g. 0.95")
    if not (math.isfinite(time_limit) and time_limit > 0) or int(max_iterations) < 1:
        raise InputError("the invalid-count search needs a positive time limit and at least "
                         "one iteration")
    problem, words = problem_of(assoc, float(threshold), confidence_level, order)
    n = assoc.count
    if problem is None:
        return InvalidCount(None, None, n, True, None, 0, (), float(threshold), words,
                            confidence_level, order, 0)
    lower, upper, witness, iterations = min_drops(problem, int(max_iterations),
                                                  float(time_limit))
    names = tuple(name for name, d in zip(assoc.names, witness) if d > 0.5)
    count = lower - 1
    method = METHOD_BOUNDS if iterations == 0 and lower == upper else METHOD
    return InvalidCount(count, count / n, n, lower == upper, upper - 1, upper - lower, names,
                        float(threshold), words, confidence_level, order, iterations, method)
