r"""The linear programmes and closed forms behind the falsification adaptive set.

The programmes of :mod:`sensiv.sensitivity.adaptive` are written in scaled coordinates
(:class:`Scaled`: every coefficient of order one), compiled once per number of instruments with
cvxpy Parameters and solved with HiGHS; the closed forms derived in that module's docstring
check them.  :func:`check_reduced_form` validates a reduced form once for both.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass
from typing import Literal

import numpy as np

from sensiv.core.errors import InputError, SolverError
from sensiv.core.results import Interval
from sensiv.partial_id.solver import solve
from sensiv.sensitivity.direct_sets import Scale
from sensiv.sensitivity.robust_set import ReducedForm

Units = Literal["effect", "sd"]
UNITS: tuple[str, ...] = ("effect", "sd")


# ============================================================================ the programmes
@dataclass(frozen=True, slots=True)
class Programmes:
    """The linear programmes for ``K`` instruments, in scaled coordinates ``(b, d)``."""

    b: object
    d: object
    a: object
    g: object
    weights: object
    radius: object
    sense: object
    relax: object
    relaxed_set: object


@functools.lru_cache(maxsize=16)
def programmes(k: int) -> Programmes:
    """The two parameterised programmes for ``k`` instruments, compiled once and cached."""
    import cvxpy as cp

    # Scaled coordinates: β = β₀ + s·b, δ = m·d, and |ρ_k − βπ_k| ≤ δ c_k becomes
    # |a_k − g_k b| ≤ d with every |a_k|, |g_k| ≤ 1 (see Scaled).
    b = cp.Variable()
    d = cp.Variable()
    a = cp.Parameter(k)
    g = cp.Parameter(k)
    weights = cp.Parameter(k, nonneg=True)
    radius = cp.Parameter(nonneg=True)
    sense = cp.Parameter()
    gap = a - cp.multiply(g, b)
    # Relaxation programme (frontier along the direction w):
    #   minimise d   over (b, d)
    #   subject to   −d·w_k ≤ a_k − g_k b ≤ d·w_k  (every k),   d ≥ 0.
    # w = 1 gives δ*; w = 1 − e_j holds instrument j exactly valid.
    relax = cp.Problem(cp.Minimize(d), [gap <= cp.multiply(weights, d),
                                        -gap <= cp.multiply(weights, d), d >= 0])
    # Identified-set programme at a common relaxation r:
    #   maximise σ·b   over b   subject to   −r ≤ a_k − g_k b ≤ r  (every k);  σ = ±1.
    relaxed_set = cp.Problem(cp.Maximize(sense * b), [gap <= radius, -gap <= radius])
    assert relax.is_dcp(dpp=True) and relaxed_set.is_dcp(dpp=True)
    return Programmes(b, d, a, g, weights, radius, sense, relax, relaxed_set)


@dataclass(frozen=True, slots=True)
class Scaled:
    """The problem data in scaled coordinates (all coefficients of order one)."""

    beta0: float
    s: float
    m: float
    a: np.ndarray
    g: np.ndarray

    def beta(self, b: float) -> float:
        return self.beta0 + self.s * b


def relaxation_scales(rf: ReducedForm, units: str, scale: Scale | None) -> np.ndarray:
    """``c_k`` of the relaxation ``|γ_k| ≤ δ c_k``."""
    if units == "effect":
        return np.abs(rf.pi)
    return scale.outcome_sd / np.asarray(scale.instrument_sd, float)


def scaled_problem(rf: ReducedForm, c: np.ndarray) -> Scaled:
    """Centre ``β`` at the median single-instrument estimate and scale ``β`` and ``δ`` so that
    every coefficient of the programmes is at most one in size (well-conditioned solves)."""
    rho, pi = np.asarray(rf.rho, float), np.asarray(rf.pi, float)
    t = pi / c
    beta0 = float(np.median(rho / pi))
    raw = (rho - beta0 * pi) / c
    m = float(np.max(np.abs(raw)))
    m = m if m > 0 else 1.0
    s = m / float(np.max(np.abs(t)))
    return Scaled(beta0, s, m, raw / m, t / float(np.max(np.abs(t))))


def solve_relax(progs: Programmes, weights: np.ndarray) -> tuple[float, float]:
    """``(d, b)`` at the optimum of the relaxation programme along ``weights``."""
    progs.weights.value = weights
    sol = solve(progs.relax, what="least-relaxation programme")
    if sol.outcome != "optimal":
        # Always feasible and bounded for the weights used here (at most one zero weight).
        raise SolverError(f"the least-relaxation programme was reported {sol.outcome}")
    return max(float(progs.d.value), 0.0) + 0.0, float(progs.b.value)  # + 0.0: no "-0.0"


def solve_range(progs: Programmes, radius: float) -> tuple[float, float] | None:
    """Ends of ``{b : |a − g b| ≤ radius}`` in scaled units, or ``None`` when it is empty."""
    progs.radius.value = radius
    ends = []
    for sense in (-1.0, 1.0):
        progs.sense.value = sense
        sol = solve(progs.relaxed_set, what="identified-set programme")
        if sol.outcome == "infeasible":
            return None
        if sol.outcome == "unbounded":  # impossible with every π_k ≠ 0; kept for honesty
            ends.append(sense * math.inf)
            continue
        ends.append(float(progs.b.value))
    return ends[0], ends[1]


def check_reduced_form(rf: ReducedForm, units: str, scale: Scale | None,
                       instruments) -> tuple[tuple[str, ...], np.ndarray]:
    """Validate a reduced form for the relaxation in ``units``; return the instrument names
    (default: ``scale.instruments`` or ``z1..zK``) and the scales ``c_k`` of
    :func:`relaxation_scales`.

    Raises
    ------
    InputError
        Unknown units, mismatched or non-finite coefficients, a first stage of exactly zero,
        ``"sd"`` without a matching ``scale``, or scales that are not positive and finite.
    """
    if units not in UNITS:
        raise InputError(f"units '{units}' is not a relaxation unit; choose one of "
                         f"{', '.join(UNITS)}")
    rho, pi = np.atleast_1d(np.asarray(rf.rho, float)), np.atleast_1d(np.asarray(rf.pi, float))
    k = rho.size
    if pi.size != k or k == 0:
        raise InputError(f"the reduced form has {rho.size} coefficient(s) but the first stage "
                         f"{pi.size}; give one of each per instrument")
    if units == "sd":
        if scale is None or len(scale.instrument_sd) != k:
            raise InputError("units 'sd' need the outcome and instrument SDs: pass scale= "
                             "(a sensiv.sensitivity.direct_sets.Scale for the same instruments)")
    if instruments is None:
        instruments = scale.instruments if scale is not None else tuple(
            f"z{j + 1}" for j in range(k))
    instruments = tuple(instruments)
    if len(instruments) != k:
        raise InputError(f"{len(instruments)} instrument name(s) for {k} coefficient(s)")
    if not (np.all(np.isfinite(rho)) and np.all(np.isfinite(pi))):
        raise InputError("the reduced-form and first-stage coefficients must be finite")
    zero = [name for name, p in zip(instruments, pi) if p == 0.0]
    if zero:
        raise InputError(f"instrument(s) {', '.join(map(repr, zero))} have a first-stage "
                         "coefficient of exactly zero given the other instruments, so they "
                         "say nothing about the effect; drop them")
    c = relaxation_scales(rf, units, scale)
    if not np.all(np.isfinite(c) & (c > 0)):
        raise InputError("the relaxation scales must be positive and finite; check that the "
                         "outcome and every instrument vary")
    return instruments, c


# ============================================================================ closed forms
def closed_form(rf: ReducedForm, *, units: Units = "effect",
                scale: Scale | None = None) -> tuple[Interval, float]:
    r"""``(FAS, δ*)`` from the closed forms derived in :mod:`sensiv.sensitivity.adaptive`.

    Examples
    --------
    >>> from sensiv.sensitivity.robust_set import ReducedForm
    >>> rf = ReducedForm(np.array([1.0, 3.0]), np.array([1.0, 1.0]), np.eye(2), np.zeros((2, 2)),
    ...                  np.eye(2), 5.99)
    >>> fas, delta = closed_form(rf)
    >>> fas.to_list(), delta
    ([1.0, 3.0], 1.0)
    """
    _, c = check_reduced_form(rf, units, scale, None)
    single = np.asarray(rf.rho, float) / np.asarray(rf.pi, float)
    h = c / np.abs(np.asarray(rf.pi, float))
    gaps = (single[:, None] - single[None, :]) / (h[:, None] + h[None, :])
    return Interval(single.min(), single.max()), float(max(gaps.max(), 0.0))


def closed_form_relaxed_set(rf: ReducedForm, relaxation: float, *, units: Units = "effect",
                            scale: Scale | None = None) -> Interval | None:
    """``B(δ·1) = [max_k (β_k − δh_k), min_k (β_k + δh_k)]``, or ``None`` when empty."""
    _, c = check_reduced_form(rf, units, scale, None)
    single = np.asarray(rf.rho, float) / np.asarray(rf.pi, float)
    h = c / np.abs(np.asarray(rf.pi, float))
    low, high = float(np.max(single - relaxation * h)), float(np.min(single + relaxation * h))
    return Interval(low, high) if low <= high else None
