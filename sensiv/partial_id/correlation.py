r"""Correlation-restriction bounds for an imperfect instrument (Nevo & Rosen 2012).

Model: ``y = X β + W κ + u`` with one endogenous treatment ``X``, instruments ``Z₁ … Z_K`` and
exogenous controls ``W`` (with a constant unless switched off).  All correlations below are
of the variables after partialling out ``W`` (the conditional, linear-projection version of
the assumption).  The exclusion restriction ``corr(Z_k, u) = 0`` is replaced by

* **same sign**: ``corr(Z_k, u)`` has the sign of ``corr(X, u)`` (each instrument is less
  endogenous than the treatment, in the same direction);
* **bounded ratio**: ``|corr(Z_k, u)| ≤ r̄ · |corr(X, u)|`` with ``0 ≤ r̄ ≤ 1``; ``r̄ = 0`` is
  the exclusion restriction;
* optionally a known sign ``s`` of ``corr(X, u)`` (``endogeneity``).

In standardised units (``ρ``: partial correlations, ``b = β σ_X / σ_y``) the residual
covariances are ``cov(X, u) ∝ ρ_xy − b`` and ``cov(Z_k, u) ∝ ρ_{z_k y} − b ρ_{z_k x}``, so
for a fixed sign ``s`` every condition is linear in ``b``:

.. math::

    s(ρ_{xy} − b) ≥ 0,\qquad 0 ≤ s(ρ_{z_k y} − b ρ_{z_k x}) ≤ \bar r\, s(ρ_{xy} − b).

The identified set for sign ``s`` is therefore an interval (possibly empty or unbounded) whose
ends are two linear programmes; the identified set is the union over the admissible signs.
With both signs allowed the two pieces lie on either side of the OLS estimate and touch only
when OLS and 2SLS agree, so an unknown sign usually gives two disjoint pieces.

One instrument, closed form (re-derived here; Nevo & Rosen 2012 write the bounds through
``V(λ) = σ_X Z − λ σ_Z X``): the sign-``s`` piece is
``{β(λ) : λ ∈ [0, r̄], s (ρ_xy ρ_zx − ρ_zy)/(ρ_zx − λ) ≥ 0}`` with
``β(λ) = cov(V(λ), y) / cov(V(λ), X) = (σ_y/σ_X)(ρ_zy − λ ρ_xy)/(ρ_zx − λ)``, monotone in
``λ`` on either side of the pole ``λ = ρ_zx``; see :func:`one_instrument_piece`.
"""

from __future__ import annotations

import functools
import math
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np

from sensiv.estimation import linalg
from sensiv.core.errors import InaccurateSolveWarning, InputError, SolverError
from sensiv.estimation.design import build_design
from sensiv.estimation.iv import prepare
from sensiv.estimation.moments import Moments, accumulate, chunk_moments
from sensiv.core.results import Interval, describe, format_number, json_number

Endogeneity = Literal["positive", "negative", "unknown"]
ENDOGENEITY: tuple[str, ...] = ("positive", "negative", "unknown")
_SIGNS = {"positive": (1,), "negative": (-1,), "unknown": (1, -1)}
_SIGN_NAMES = {1: "positive", -1: "negative"}

DEFAULT_MAX_RATIO = 1.0
DEFAULT_POINTS = 51
DEFAULT_REPS = 999
MIN_POINTS = 2
# A bootstrap standard error needs at least this many usable replicates.
MIN_USABLE_REPS = 2
# Relative gap between a programme's min and max treated as rounding (the set is one point).
POINT_SET_TOL = 1e-9
# Partialled standard deviation below this share of the raw one: the column is explained by
# the controls.
EXPLAINED_SHARE = 1e-12
# Rows shown in the text summary of the curve.
SUMMARY_CURVE_ROWS = 11

CAUTION = ("Caution: these bounds hold only under the stated correlation restriction (each "
           "instrument correlated with the error in the treatment's direction and at most r̄ "
           "times as strongly); they do not prove any instrument valid, and a different "
           "restriction gives different bounds.")


# ----------------------------------------------------------------------------- moments
@dataclass(frozen=True, slots=True)
class PartialCorrelations:
    """Partial correlations (controls partialled out) that the bounds depend on.

    Attributes
    ----------
    xy : float
        ``corr(X, y)``.
    zy, zx : ndarray, shape (K,)
        ``corr(Z_k, y)`` and ``corr(Z_k, X)``.
    scale : float
        ``σ_y / σ_X``: a coefficient in standardised units times ``scale`` is ``β``.
    """

    xy: float
    zy: np.ndarray
    zx: np.ndarray
    scale: float


def partial_correlations(moments: Moments, layout) -> PartialCorrelations | None:
    """Partial correlations of ``[y, X, Z]`` given the controls, from moments only.

    Uses the design maps of :func:`sensiv.estimation.iv.build_design` on the augmented centred rows, so
    the constant, numeric and indicator controls are handled exactly as in the 2SLS fit.
    Returns ``None`` when a partialled standard deviation is zero or not finite (a degenerate
    bootstrap replicate); the boundary checks of :func:`sensiv.estimation.iv.prepare` run before this on
    the original data.
    """
    design = build_design(moments, layout.outcome, layout.treatments, layout.instruments,
                          layout.controls, layout.constant)
    gram = moments.augmented
    maps = np.column_stack([design.y, design.x[:, 0], design.z])
    raw_var = np.diag(maps.T @ gram @ maps).copy()
    w = design.w
    with np.errstate(all="ignore"):
        try:
            if w.shape[1]:
                maps = maps - w @ linalg.scaled_cholesky(w.T @ gram @ w).solve(
                    w.T @ gram @ maps)
        except np.linalg.LinAlgError:
            return None
        cov = maps.T @ gram @ maps
        var = np.diag(cov)
        if not (np.all(np.isfinite(cov)) and np.all(var > EXPLAINED_SHARE**2 * raw_var)):
            return None
        sd = np.sqrt(var)
        corr = cov / np.outer(sd, sd)
    return PartialCorrelations(float(corr[0, 1]), corr[2:, 0].copy(), corr[2:, 1].copy(),
                               float(sd[0] / sd[1]))


# ----------------------------------------------------------------------------- closed form
def one_instrument_piece(corr_xy: float, corr_zy: float, corr_zx: float, max_ratio: float,
                         sign: int) -> Interval | None:
    r"""Closed-form sign-``s`` piece of the set for one instrument, in standardised units.

    With ``a = ρ_zy``, ``b = ρ_zx``, ``c = ρ_xy`` and ``β(λ) = (a − λc)/(b − λ)``,

    .. math::

        \{β(λ) : λ ∈ [0, \bar r],\ s\,(cb − a)/(b − λ) ≥ 0\}, \qquad
        β'(λ) = (a − cb)/(b − λ)^2 .

    The sign condition is ``s·(c − β(λ)) ≥ 0``.  If ``s(cb − a) > 0`` the admissible ``λ`` lie
    below the pole ``b`` (none if ``b ≤ 0``); if ``s(cb − a) < 0`` above it.  When the pole
    falls inside ``[0, r̄]`` the piece is a half-line running to ``−s·∞`` (from the side of
    ``c``, the OLS estimate, away from it).  ``cb = a`` (OLS = 2SLS) is degenerate and handled
    separately.  Returns ``None`` for an empty piece; multiply by ``σ_y/σ_X`` for ``β``.

    Examples
    --------
    >>> one_instrument_piece(0.5, 0.1, 0.4, 0.0, 1)      # r̄ = 0: the 2SLS estimate a/b
    Interval(low=0.25, high=0.25)
    >>> one_instrument_piece(0.5, 0.1, 0.4, 0.2, 1)      # pole 0.4 outside [0, 0.2]
    Interval(low=0.0, high=0.25)
    >>> one_instrument_piece(0.5, 0.1, 0.4, 0.5, 1)      # pole 0.4 inside [0, 0.5]
    Interval(low=-inf, high=0.25)
    >>> one_instrument_piece(0.5, 0.1, 0.4, 0.0, -1) is None   # 2SLS < OLS rules out s < 0
    True
    """
    a, b, c, s = corr_zy, corr_zx, corr_xy, sign
    inf = math.inf
    gap = s * (c * b - a)
    if gap == 0.0:
        # β(λ) = c for every λ ≠ b, and at λ = b every β with s(c − β) ≥ 0 solves the ratio.
        if 0.0 <= b <= max_ratio:
            return Interval(-inf, c) if s > 0 else Interval(c, inf)
        return Interval(c, c)

    def beta(lam: float) -> float:
        return (a - lam * c) / (b - lam)

    if gap > 0:  # λ < b
        if b <= 0.0:
            return None
        if max_ratio < b:
            ends = (beta(0.0), beta(max_ratio))
            return Interval(min(ends), max(ends))
        far = -s * inf
        return Interval(min(beta(0.0), far), max(beta(0.0), far))
    # gap < 0: λ > b
    if max_ratio <= b:
        return None
    if b < 0.0:
        ends = (beta(0.0), beta(max_ratio))
        return Interval(min(ends), max(ends))
    far = -s * inf
    return Interval(min(beta(max_ratio), far), max(beta(max_ratio), far))


# ----------------------------------------------------------------------------- elimination
def _constraint_rows(pc: PartialCorrelations, sign: int, ratio: float) -> tuple[np.ndarray,
                                                                                np.ndarray]:
    """The programme's constraints as rows ``α b ≤ γ`` in standardised units."""
    s = float(sign)
    alpha = np.concatenate([[s], s * pc.zx, -s * (pc.zx - ratio)])
    gamma = np.concatenate([[s * pc.xy], s * pc.zy, -s * (pc.zy - ratio * pc.xy)])
    return alpha, gamma


def eliminate(pc: PartialCorrelations, sign: int, ratio: float) -> tuple[float, float] | None:
    """Exact solution of both bound programmes by eliminating the single unknown.

    A linear programme in one variable ``b`` with rows ``α_i b ≤ γ_i`` has the feasible set
    ``[max_{α_i<0} γ_i/α_i, min_{α_i>0} γ_i/α_i]`` (empty if a row with ``α_i = 0`` has
    ``γ_i < 0`` or the ends cross).  Used for the bootstrap replicates, where thousands of
    solves through cvxpy would dominate the run time; the tests check it against the
    programmes.  Returns ``(low, high)`` in standardised units or ``None`` when empty.
    """
    alpha, gamma = _constraint_rows(pc, sign, ratio)
    if np.any((alpha == 0.0) & (gamma < 0.0)):
        return None
    with np.errstate(divide="ignore", invalid="ignore"):
        ends = gamma / alpha
    below, above = alpha < 0.0, alpha > 0.0
    low = float(np.max(ends[below])) if below.any() else -math.inf
    high = float(np.min(ends[above])) if above.any() else math.inf
    if low > high:
        return None
    return low, high


# ----------------------------------------------------------------------------- programmes
class _Programmes:
    """The bound programmes for ``K`` instruments, built once (DPP) and re-solved by setting
    parameter values; the partial correlations are parameters too, so a bootstrap replicate
    or a new data set re-uses the compiled programmes."""

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
                solution = _solve(problem, what)
            except SolverError:
                if problem.status != INFEASIBLE_OR_UNBOUNDED:
                    raise
                # HiGHS's presolve may stop at "infeasible or unbounded"; a feasibility
                # solve tells which.
                check = _solve(feasibility, f"feasibility programme (sign {sign:+d})")
                if check.outcome == "infeasible":
                    return None
                ends.append(-math.inf if side == "lower" else math.inf)
                continue
            if solution.outcome == "infeasible":
                if ends:
                    warnings.warn(f"the {what} is infeasible although the lower bound was "
                                  "found; the set is treated as empty", InaccurateSolveWarning,
                                  stacklevel=3)
                return None
            ends.append(solution.value)
        low, high = ends
        if low > high:
            if low - high > POINT_SET_TOL * max(1.0, abs(low)):
                warnings.warn(f"the bound programmes (sign {sign:+d}, r̄ = {ratio:g}) crossed: "
                              f"lower {low!r} > upper {high!r}; the set is treated as empty",
                              InaccurateSolveWarning, stacklevel=3)
                return None
            low, high = high, low
        return low, high

    def least_ratio(self, sign: int) -> float | None:
        """Infimum of the ratios with a non-empty sign-``s`` piece, or ``None`` if none."""
        solution = _solve(self.min_ratio[sign], f"smallest-ratio programme (sign {sign:+d})")
        if solution.outcome != "optimal":
            return None
        return max(solution.value, 0.0)


def _solve(problem, what: str):
    from sensiv.partial_id.solver import solve

    return solve(problem, what=what)


@functools.lru_cache(maxsize=8)
def _programmes(k: int) -> _Programmes:
    return _Programmes(k)


# ----------------------------------------------------------------------------- set algebra
def _union(pieces: Sequence[tuple[float, float]]) -> tuple[Interval, ...]:
    """Sorted union of intervals, merging those that overlap or touch."""
    merged: list[list[float]] = []
    for low, high in sorted(pieces):
        if merged and low <= merged[-1][1]:
            merged[-1][1] = max(merged[-1][1], high)
        else:
            merged.append([low, high])
    return tuple(Interval(low, high) for low, high in merged)


def _scaled(piece: tuple[float, float] | None, scale: float) -> tuple[float, float] | None:
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


# ----------------------------------------------------------------------------- results
@dataclass(frozen=True, slots=True)
class CurvePoint:
    """The identified set at one value of the ratio bound ``r̄``.

    ``pieces`` is empty when the set is empty; an unbounded end is ``±inf``.
    """

    max_ratio: float
    pieces: tuple[Interval, ...]

    @property
    def hull(self) -> Interval | None:
        if not self.pieces:
            return None
        return Interval(self.pieces[0].low, self.pieces[-1].high)

    def to_dict(self) -> dict:
        hull = self.hull
        return {"max_ratio": self.max_ratio,
                "lower": json_number(hull.low) if hull else None,
                "upper": json_number(hull.high) if hull else None,
                "empty": hull is None,
                "pieces": [p.to_list() for p in self.pieces]}


@dataclass(frozen=True, slots=True)
class BootstrapSummary:
    """Nonparametric bootstrap of the two bounds at ``max_ratio``.

    A replicate is *used* when its set is non-empty and every end that is finite in the
    estimate is finite in the replicate; the others are counted (``n_empty``: empty set,
    ``n_unbounded``: an end unbounded that is bounded in the estimate, ``n_degenerate``: a
    partialled variable without variation in the resample) and left out.
    """

    reps: int
    seed: int
    clusters: int | None
    n_used: int
    n_empty: int
    n_unbounded: int
    n_degenerate: int
    se_lower: float
    se_upper: float
    ci: Interval | None

    @property
    def n_failed(self) -> int:
        return self.reps - self.n_used

    def to_dict(self) -> dict:
        return {"reps": self.reps, "seed": self.seed,
                "resampled": "clusters" if self.clusters is not None else "rows",
                "n_used_reps": self.n_used, "n_failed_reps": self.n_failed,
                "n_empty_reps": self.n_empty, "n_unbounded_reps": self.n_unbounded,
                "n_degenerate_reps": self.n_degenerate,
                "se_lower": json_number(self.se_lower), "se_upper": json_number(self.se_upper)}


@dataclass(frozen=True, slots=True)
class CorrelationBounds:
    """Identified set for the treatment effect under the Nevo & Rosen (2012) restriction.

    Attributes
    ----------
    pieces : tuple of Interval
        The identified set at ``max_ratio`` as disjoint, sorted intervals (empty: no piece).
    pieces_by_sign : tuple of (str, Interval or None)
        The piece for each admissible sign of ``corr(X, u)`` ("positive", "negative").
    curve : tuple of CurvePoint
        The set on a grid of ``r̄`` from 0 to ``max_ratio``.
    breakdown_ratio : float or None
        Smallest ``r̄ ≤ 1`` whose set contains ``threshold`` (exact), ``None`` if none.
    min_ratio_consistent : float or None
        Smallest ``r̄`` with a non-empty set (an infimum), 0 when the exclusion restriction is
        not contradicted, ``None`` when even ``r̄ = 1`` gives an empty set.
    bootstrap : BootstrapSummary or None
        ``None`` when ``reps = 0`` or the set is empty.
    """

    outcome: str
    treatment: str
    instruments: tuple[str, ...]
    controls: tuple[str, ...]
    constant: bool
    n: int
    n_dropped: int
    weighted: bool
    max_ratio: float
    endogeneity: str
    threshold: float
    confidence_level: float
    tsls: float
    ols: float
    instrument_treatment_corr: tuple[float, ...]
    pieces: tuple[Interval, ...]
    pieces_by_sign: tuple[tuple[str, Interval | None], ...]
    curve: tuple[CurvePoint, ...]
    breakdown_ratio: float | None
    min_ratio_consistent: float | None
    bootstrap: BootstrapSummary | None
    notes: tuple[str, ...]

    @property
    def caution(self) -> str:
        return CAUTION

    @property
    def empty(self) -> bool:
        return not self.pieces

    @property
    def identified_set(self) -> Interval | None:
        """The hull of the pieces (``None`` when the set is empty)."""
        if not self.pieces:
            return None
        return Interval(self.pieces[0].low, self.pieces[-1].high)

    @property
    def ci(self) -> Interval | None:
        return self.bootstrap.ci if self.bootstrap is not None else None

    def assumptions(self) -> list[str]:
        controls = (", ".join(self.controls) + (" and a constant" if self.constant else "")
                    if self.controls else ("a constant" if self.constant else "nothing"))
        sign = {"positive": "the treatment is positively correlated with the error (OLS "
                            "biased upwards)",
                "negative": "the treatment is negatively correlated with the error (OLS "
                            "biased downwards)",
                "unknown": "the sign of the treatment's correlation with the error is not "
                           "assumed: the set is the union over both signs"}[self.endogeneity]
        out = [
            f"linear model with a constant effect of '{self.treatment}' on '{self.outcome}'; "
            f"correlations are taken after partialling out {controls}",
            "each instrument is correlated with the structural error in the same direction as "
            "the treatment (Nevo & Rosen 2012)",
            f"each instrument's correlation with the error is at most r̄ = "
            f"{format_number(self.max_ratio)} times the treatment's in absolute value "
            "(r̄ = 0 is the exclusion restriction)",
            sign,
        ]
        if self.bootstrap is not None:
            unit = (f"whole clusters ({self.bootstrap.clusters})"
                    if self.bootstrap.clusters is not None else "rows")
            out.append(
                f"inference: nonparametric bootstrap resampling {unit}, {self.bootstrap.reps} "
                "replicates, for the standard errors of the two bounds, and the Imbens & "
                "Manski (2004) interval for the coefficient; this treats the bounds as smooth "
                "in the data, which fails near a ratio where an end becomes unbounded or the "
                "set becomes empty")
        return out

    def to_dict(self) -> dict:
        hull = self.identified_set
        ci = self.ci
        out = {
            "identified_set": hull.to_list() if hull else None,
            "empty": self.empty,
            "pieces": [p.to_list() for p in self.pieces],
            "by_sign": {name: (piece.to_list() if piece else None)
                        for name, piece in self.pieces_by_sign},
            "ci": ci.to_list() if ci else None,
            "confidence_level": self.confidence_level,
            "curve": [point.to_dict() for point in self.curve],
            "breakdown_ratio": json_number(self.breakdown_ratio),
            "breakdown_method": "exact (membership of the threshold is linear in r̄)",
            "threshold": self.threshold,
            "threshold_in_set": any(p.contains(self.threshold) for p in self.pieces),
            "min_ratio_consistent": json_number(self.min_ratio_consistent),
            "min_ratio_method": "exact (Charnes-Cooper linear programme per sign)",
            "max_ratio": self.max_ratio,
            "endogeneity": self.endogeneity,
            "tsls": json_number(self.tsls),
            "ols": json_number(self.ols),
            "instrument_treatment_corr": dict(zip(self.instruments,
                                                  map(json_number,
                                                      self.instrument_treatment_corr))),
            "outcome": self.outcome,
            "treatment": self.treatment,
            "instruments": list(self.instruments),
            "controls": list(self.controls),
            "constant": self.constant,
            "n": self.n,
            "n_dropped": self.n_dropped,
            "weighted": self.weighted,
            "bootstrap": self.bootstrap.to_dict() if self.bootstrap else None,
            "n_failed_reps": self.bootstrap.n_failed if self.bootstrap else None,
            "notes": list(self.notes),
            "assumptions": self.assumptions(),
            "caution": CAUTION,
        }
        return out

    def __str__(self) -> str:
        return describe(self)


def _describe_set(result: CorrelationBounds) -> str:
    if result.empty:
        return "empty"
    return " U ".join(str(p) for p in result.pieces)


def _curve_rows(result: CorrelationBounds) -> list[list[str]]:
    points = result.curve
    if len(points) > SUMMARY_CURVE_ROWS:
        picks = np.unique(np.round(np.linspace(0, len(points) - 1, SUMMARY_CURVE_ROWS)))
        points = tuple(points[int(j)] for j in picks)
    rows = []
    for p in points:
        hull = p.hull
        rows.append([format_number(p.max_ratio), "empty" if hull is None else
                     format_number(hull.low), "" if hull is None else format_number(hull.high),
                     str(len(p.pieces))])
    return rows


def _summary_lines(result: CorrelationBounds, *, markdown: bool) -> list[str]:
    pct = f"{100 * result.confidence_level:g}%"
    r = format_number(result.max_ratio)
    title = (f"Correlation-restriction bounds (Nevo & Rosen 2012): effect of "
             f"{result.treatment} on {result.outcome}")
    lines = [f"# {title}" if markdown else title, ""]
    lines.append(f"Instruments: {', '.join(result.instruments)}; controls: "
                 f"{', '.join(result.controls) if result.controls else 'none'}"
                 f"{' and a constant' if result.constant else ''}; n = {result.n} "
                 f"({result.n_dropped} rows dropped for missing values)"
                 f"{'; weighted' if result.weighted else ''}.")
    lines.append(f"Endogeneity sign: {result.endogeneity}; ratio bound r̄ = {r}. "
                 f"2SLS (r̄ = 0): {format_number(result.tsls)}; OLS: "
                 f"{format_number(result.ols)}.")
    lines.append("")
    lines.append(f"Identified set at r̄ = {r}: {_describe_set(result)}")
    for name, piece in result.pieces_by_sign:
        lines.append(f"  {name} endogeneity: {piece if piece else 'empty'}")
    if result.ci is not None:
        b = result.bootstrap
        lines.append(f"{pct} Imbens-Manski interval: {result.ci} (bootstrap: {b.n_used} of "
                     f"{b.reps} replicates used, seed {b.seed})")
    elif result.bootstrap is not None:
        lines.append(f"{pct} interval: not available (too few usable bootstrap replicates)")
    m = result.min_ratio_consistent
    lines.append("Smallest r̄ consistent with the data: "
                 + (format_number(m) if m is not None else "none in [0, 1]"))
    k = result.breakdown_ratio
    lines.append(f"Breakdown r̄ (set first contains {format_number(result.threshold)}): "
                 + (format_number(k) if k is not None else "none in [0, 1]"))
    lines.append("")
    header = ["r̄", "lower", "upper", "pieces"]
    rows = _curve_rows(result)
    if markdown:
        lines.append("| " + " | ".join(header) + " |")
        lines.append("|" + "|".join("---" for _ in header) + "|")
        lines += ["| " + " | ".join(row) + " |" for row in rows]
    else:
        widths = [max(len(row[j]) for row in [header, *rows]) for j in range(len(header))]
        lines.append("  ".join(h.rjust(w) for h, w in zip(header, widths)))
        lines += ["  ".join(c.rjust(w) for c, w in zip(row, widths)) for row in rows]
    for note in result.notes:
        lines += ["", ("**Note:** " if markdown else "Note: ") + note]
    lines += ["", "## Assumptions" if markdown else "Assumptions:"]
    lines += [f"- {a}" for a in result.assumptions()]
    lines += ["", ("> " if markdown else "") + CAUTION]
    return lines


def bounds_markdown(result: CorrelationBounds) -> str:
    """Markdown report of a :class:`CorrelationBounds` (formatting only)."""
    return "\n".join(_summary_lines(result, markdown=True)) + "\n"


# ----------------------------------------------------------------------------- validation
def check_options(*, max_ratio: float, endogeneity: str, threshold: float, points: int,
                  reps: int, seed: int | None, confidence_level: float) -> None:
    """Validate the options (the caller's mistakes become :class:`InputError`)."""
    if not isinstance(max_ratio, (int, float)) or not 0.0 <= max_ratio <= 1.0:
        raise InputError(f"--max-ratio {max_ratio!r} is outside [0, 1]; the instrument's "
                         "correlation with the error may be at most as strong as the "
                         "treatment's: give a ratio such as 0.5 (0 is the exclusion restriction)")
    if endogeneity not in ENDOGENEITY:
        raise InputError(f"--endogeneity {endogeneity!r} is not a sign; choose one of "
                         f"{', '.join(ENDOGENEITY)}")
    if not isinstance(threshold, (int, float)) or not math.isfinite(threshold):
        raise InputError(f"--threshold {threshold!r} is not a finite number; give the effect "
                         "size whose inclusion breaks the conclusion, e.g. 0")
    if isinstance(points, bool) or not isinstance(points, (int, np.integer)) \
            or points < MIN_POINTS:
        raise InputError(f"--points {points!r} is too small; the curve needs at least "
                         f"{MIN_POINTS} ratios (the default is {DEFAULT_POINTS})")
    if isinstance(reps, bool) or not isinstance(reps, (int, np.integer)) or reps < 0:
        raise InputError(f"--reps {reps!r} is not a number of bootstrap replicates; give a "
                         f"positive integer such as {DEFAULT_REPS}")
    if seed is not None and (isinstance(seed, bool) or not isinstance(seed, (int, np.integer))
                             or seed < 0):
        raise InputError(f"--seed {seed!r} is not a non-negative integer; give e.g. 12345")
    if not isinstance(confidence_level, (int, float)) or not 0.0 < confidence_level < 1.0:
        raise InputError(f"--level {confidence_level!r} is outside (0, 1); give a confidence "
                         "level such as 0.95")


def check_one_treatment(spec) -> None:
    if len(spec.treatments) != 1:
        raise InputError(
            f"the correlation bounds need exactly one treatment; got {len(spec.treatments)} "
            f"({', '.join(spec.treatments)}): pass a single --treatment (treat the others as "
            "controls if they are exogenous)")


# ----------------------------------------------------------------------------- bootstrap
def _replicate_moments(values: np.ndarray, weights: np.ndarray | None,
                       codes: np.ndarray | None, columns: Sequence[str], reps: int, seed: int):
    """Moments of each bootstrap replicate: multinomial counts as weights, no row copies."""
    rng = np.random.default_rng(seed)
    n = values.shape[0]
    base = np.ones(n) if weights is None else weights
    groups = None if codes is None else int(codes.max()) + 1
    for _ in range(reps):
        if codes is None:
            counts = np.bincount(rng.integers(0, n, size=n), minlength=n)
        else:
            counts = np.bincount(rng.integers(0, groups, size=groups), minlength=groups)[codes]
        yield chunk_moments(columns, values, counts * base)


def _hull(pc: PartialCorrelations, signs: Sequence[int],
          ratio: float) -> tuple[float, float] | None:
    pieces = [p for p in (eliminate(pc, s, ratio) for s in signs) if p is not None]
    if not pieces:
        return None
    return (min(p[0] for p in pieces) * pc.scale, max(p[1] for p in pieces) * pc.scale)


def _bootstrap(rows, layout, signs, ratio, estimate: Interval, reps, seed, confidence_level,
               progress) -> BootstrapSummary:
    from sensiv.estimation.inference import Progress, imbens_manski

    values, weights, codes = rows
    lows, highs = np.full(reps, np.nan), np.full(reps, np.nan)
    n_empty = n_unbounded = n_degenerate = 0
    bar = Progress(total=reps, label="bootstrap", enabled=progress)
    replicates = _replicate_moments(values, weights, codes, layout.columns, reps, seed)
    for j, moments in enumerate(replicates):
        pc = partial_correlations(moments, layout)
        hull = None if pc is None else _hull(pc, signs, ratio)
        if pc is None:
            n_degenerate += 1
        elif hull is None:
            n_empty += 1
        elif ((math.isfinite(estimate.low) and not math.isfinite(hull[0]))
              or (math.isfinite(estimate.high) and not math.isfinite(hull[1]))):
            n_unbounded += 1
        else:
            lows[j], highs[j] = hull
        bar.update(j + 1)
    bar.close()
    used = ~np.isnan(lows)
    n_used = int(used.sum())
    ci = None
    se_low = se_high = math.nan
    if n_used >= MIN_USABLE_REPS:
        se_low = float(np.std(lows[used], ddof=1)) if math.isfinite(estimate.low) else math.nan
        se_high = float(np.std(highs[used], ddof=1)) if math.isfinite(estimate.high) else math.nan
        ci = imbens_manski(estimate.low, estimate.high,
                           0.0 if math.isnan(se_low) else se_low,
                           0.0 if math.isnan(se_high) else se_high, confidence_level)
    groups = None if codes is None else int(codes.max()) + 1
    return BootstrapSummary(reps, seed, groups, n_used, n_empty, n_unbounded, n_degenerate,
                            se_low, se_high, ci)


def _rows(chunks, cluster: str | None):
    """Concatenate the clean chunks (values, weights, cluster codes) for resampling."""
    import pandas as pd

    values = np.concatenate([c.values for c in chunks])
    weights = None
    if chunks[0].weights is not None:
        weights = np.concatenate([c.weights for c in chunks])
    codes = None
    if cluster is not None:
        labels = np.concatenate([np.asarray(c.clusters, dtype=object) for c in chunks])
        codes, uniques = pd.factorize(labels, sort=False)
        if len(uniques) < 2:
            raise InputError(f"cluster variable '{cluster}' has only {len(uniques)} group in "
                             "the rows used; a cluster bootstrap needs many groups: drop "
                             "--cluster or choose another cluster variable")
    return values, weights, codes


# ----------------------------------------------------------------------------- main entry
def correlation_bounds(data, spec=None, *, max_ratio: float = DEFAULT_MAX_RATIO,
                       endogeneity: Endogeneity = "unknown", threshold: float = 0.0,
                       points: int = DEFAULT_POINTS, reps: int = DEFAULT_REPS,
                       seed: int | None = None, confidence_level: float = 0.95,
                       chunk_rows: int | None = None, progress: bool = True) -> CorrelationBounds:
    r"""Identified set, curve, breakdown ratio and bootstrap interval under the Nevo & Rosen
    (2012) correlation restriction.

    .. math::

        \operatorname{sign} ρ(Z_k, u) = \operatorname{sign} ρ(X, u),\qquad
        |ρ(Z_k, u)| ≤ \bar r\, |ρ(X, u)|,\quad 0 ≤ \bar r ≤ 1 .

    Parameters
    ----------
    data : sensiv.data source, pandas.DataFrame or path
    spec : sensiv.data.Spec, optional
        Required unless ``data`` is already a source; exactly one treatment.
    max_ratio : float in [0, 1]
        The ratio bound ``r̄``; the curve runs from 0 to it.
    endogeneity : {"positive", "negative", "unknown"}
        Known sign of ``corr(X, u)``, or the union over both signs.
    threshold : float
        Effect size for the breakdown ratio (the smallest ``r̄`` whose set contains it).
    points : int
        Grid points of the curve (at least 2), including 0 and ``max_ratio``.
    reps : int
        Bootstrap replicates (rows resampled, or whole clusters when the spec names a cluster
        column); 0 skips inference.
    seed : int, optional
        Seed of the bootstrap; drawn and reported when not given.
    confidence_level : float
    chunk_rows : int, optional
        Rows per chunk when reading a file.
    progress : bool
        Show a progress line on a terminal's stderr during a long bootstrap.

    Returns
    -------
    CorrelationBounds

    Notes
    -----
    The set and the curve come from the cvxpy programmes (built once per number of
    instruments, swept through parameters).  The smallest consistent ratio is a
    Charnes–Cooper programme per sign; the breakdown ratio is exact in closed form.  Bootstrap
    replicates (moments with multinomial counts as weights, so no rows are copied) are
    solved by exact one-variable elimination of the same constraints, about a hundred times
    faster than a cvxpy solve; the tests check it against the programmes.  With ``reps > 0``
    the clean rows are held in memory for resampling.

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> from sensiv.data import Spec
    >>> rng = np.random.default_rng(0)
    >>> z, v = rng.normal(size=(2, 2000))
    >>> x = z + v
    >>> u = v + 0.2 * z + rng.normal(size=2000)    # corr(z, u) / corr(x, u) ≈ 0.24
    >>> frame = pd.DataFrame({"y": 2.0 * x + u, "x": x, "z": z})
    >>> res = correlation_bounds(frame, Spec("y", ["x"], ["z"]), max_ratio=0.5, reps=0,
    ...                          points=3, endogeneity="positive")
    >>> [round(v, 3) for v in (res.tsls, res.identified_set.low, res.identified_set.high)]
    [2.179, 1.177, 2.179]
    """
    check_options(max_ratio=max_ratio, endogeneity=endogeneity, threshold=threshold,
                  points=points, reps=reps, seed=seed, confidence_level=confidence_level)
    if hasattr(data, "chunks"):
        source = data
    else:
        from sensiv.data import readers as data_layer

        source = data_layer.load(data, spec, chunk_rows=chunk_rows)
    spec = source.spec
    check_one_treatment(spec)
    layout = source.layout
    chunks = list(source.chunks()) if reps else None
    moments = accumulate(chunks if chunks is not None else source.chunks(), layout.columns)
    fitted = prepare(moments, layout)  # the data checks, 2SLS and OLS of iv.py
    pc = partial_correlations(moments, layout)
    if pc is None:
        raise InputError(f"outcome '{layout.outcome}' is fully explained by the controls (no "
                         "variation left after partialling them out); check the model")
    signs = _SIGNS[endogeneity]
    programmes = _programmes(len(layout.instruments))
    programmes.load(pc)

    ratios = np.linspace(0.0, float(max_ratio), int(points))
    curve = []
    by_sign_last: dict[int, tuple[float, float] | None] = {}
    for ratio in ratios:
        found = {s: _scaled(programmes.piece(s, float(ratio)), pc.scale) for s in signs}
        curve.append(CurvePoint(float(ratio), _union([p for p in found.values() if p])))
        by_sign_last = found
    final = curve[-1]

    if curve[0].pieces:
        min_ratio: float | None = 0.0
    else:
        least = [v for v in (programmes.least_ratio(s) for s in signs) if v is not None]
        min_ratio = min(least) if least and min(least) <= 1.0 else None
    breakdown = breakdown_ratio(pc, signs, float(threshold))

    notes = _notes(final, min_ratio, max_ratio, pc, layout, curve[0])
    boot = None
    hull = final.hull
    if reps and hull is not None and (math.isfinite(hull.low) or math.isfinite(hull.high)):
        if seed is None:
            seed = int(np.random.SeedSequence().generate_state(1)[0])
        rows = _rows(chunks, spec.cluster)
        boot = _bootstrap(rows, layout, signs, float(max_ratio), hull, int(reps), int(seed),
                          confidence_level, progress)
        if boot.n_failed:
            notes.append(
                f"{boot.n_failed} of {boot.reps} bootstrap replicates were left out "
                f"({boot.n_empty} with an empty set, {boot.n_unbounded} with an end unbounded "
                f"that is bounded in the estimate, {boot.n_degenerate} without variation in a "
                f"partialled variable); the standard errors use the remaining {boot.n_used}")
        if boot.ci is None:
            notes.append(f"only {boot.n_used} usable bootstrap replicates: no interval is "
                         "reported; increase --reps or check why replicates fail")
    elif reps and hull is None:
        notes.append("no bootstrap interval: the identified set is empty")
    elif reps:
        notes.append("no bootstrap interval: both ends of the set are unbounded, so the "
                     "interval is the whole line")

    params_t = fitted.tsls.params[-1]
    params_o = fitted.ols.params[-1]
    return CorrelationBounds(
        outcome=layout.outcome, treatment=layout.treatments[0],
        instruments=tuple(layout.instruments), controls=tuple(layout.controls),
        constant=layout.constant, n=moments.n, n_dropped=moments.n_dropped,
        weighted=spec.weight is not None, max_ratio=float(max_ratio), endogeneity=endogeneity,
        threshold=float(threshold), confidence_level=float(confidence_level),
        tsls=float(params_t), ols=float(params_o),
        instrument_treatment_corr=tuple(float(v) for v in pc.zx),
        pieces=final.pieces,
        pieces_by_sign=tuple((_SIGN_NAMES[s], None if p is None else Interval(*p))
                             for s, p in by_sign_last.items()),
        curve=tuple(curve), breakdown_ratio=breakdown, min_ratio_consistent=min_ratio,
        bootstrap=boot, notes=tuple(notes))


def _notes(final: CurvePoint, min_ratio: float | None, max_ratio: float,
           pc: PartialCorrelations, layout, at_zero: CurvePoint) -> list[str]:
    notes = []
    r = format_number(max_ratio)
    if not final.pieces:
        if min_ratio is None:
            notes.append(f"the identified set is empty at r̄ = {r} and stays empty up to "
                         "r̄ = 1: the data contradict the assumption (with the stated sign of "
                         "endogeneity) for every allowed ratio")
        else:
            notes.append(f"the identified set is empty at r̄ = {r}: the data contradict the "
                         f"assumption at this ratio; it is non-empty for r̄ above "
                         f"{format_number(min_ratio, 6)} (smallest consistent ratio)")
    elif not at_zero.pieces and len(layout.instruments) > 1:
        notes.append("with several instruments the set at r̄ = 0 is empty unless the "
                     "instruments give exactly the same 2SLS estimate; that is expected, and "
                     "the smallest consistent ratio measures how far apart they are")
    hull = final.hull
    if hull is not None and not hull.bounded:
        corr = ", ".join(f"{name} {format_number(v, 3)}"
                         for name, v in zip(layout.instruments, pc.zx))
        notes.append(f"an end of the set is unbounded at r̄ = {r}: once r̄ reaches an "
                     "instrument's partial correlation with the treatment (here: "
                     f"{corr}), that instrument's correlation with the error can be large "
                     "enough to explain its whole reduced form, and it no longer bounds the "
                     "effect on that side")
    if len(final.pieces) > 1:
        notes.append("the set has two disjoint pieces, one per sign of the treatment's "
                     "endogeneity, separated by the OLS estimate; 'identified_set' is their hull")
    return notes
