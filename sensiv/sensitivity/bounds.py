r"""Direct-effect sensitivity: what survives if the instrument has a direct effect ``γ``.

Model ``y = X β + W κ + Z γ + u``; the exclusion restriction sets ``γ = 0``.  For a *known*
``γ``, 2SLS of ``y − Zγ`` gives, for the focus coefficient,

.. math::

    \hat β(γ) = \hat β - a'γ, \qquad a = [(X̂'X̂)^{-1} X̂'Z]_{\text{focus}},

and the residual ``u(γ) = û − Mγ`` is affine in ``γ``, so every variance (classic, robust,
cluster) is a quadratic ``q(γ) = [1, −γ'] Q [1, −γ']'`` whose ``(1+k_z)²`` coefficients come from
the same second pass over the rows as the fit.  Everything below — union of confidence
intervals over a set Γ (Conley, Hansen & Rossi 2012), curves, breakdown points, prior intervals
— is evaluated from ``(β̂, a, Q)`` alone, at ``O(k³)`` per point, exactly:

* the lower end ``β̂ − a'γ − c√q(γ)`` is concave and the upper end convex in ``γ``, so over a
  convex polytope both extremes sit at vertices;
* the breakdown scale of Γ solves ``(β̂ − θ₀ − t a'v)² = c² q(t v)``, a quadratic in ``t``.
"""

from __future__ import annotations

import itertools
import math
import re
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from sensiv.estimation import distributions as dist
from sensiv.estimation import iv, linalg
from sensiv.estimation.covariance import small_factor
from sensiv.estimation.first_stage import first_stage_covariance
from sensiv.core.errors import InputError, WeakInstrumentWarning
from sensiv.estimation.moments import ScoreBlock, ScoreSums
from sensiv.core.results import Interval, describe, intervals_to_lists, json_number

SCALE_MAX = 1000.0          # breakdown scales beyond this are reported as "never" (null)
DEFAULT_POINTS = 101
ROOT_TOL = 1e-12            # relative tolerance for degenerate quadratic coefficients
VERTEX_TOL = 1e-9           # feasibility slack when enumerating polytope vertices
MAX_VERTEX_RANK = 8         # enumerating vertices by active sets is for small k_z
# Grids that locate the weak-IV-robust set with several instruments (then refined by roots):
AR_GRID = 401               # box: bounded least squares per point
AR_GRID_POLYTOPE = 101      # polytope: one quadratic programme per point
# The weak-IV-robust set "differs materially" from the Wald union when their hulls differ by
# more than this share of the Wald union's width.
MATERIAL_SHARE = 0.25
# The breakdown frontier runs over thresholds symmetric about the estimate that reach the union
# interval at scale 1 and the threshold, with this share of the reach to spare, on this many
# evenly spaced thresholds (plus the threshold itself and the ends of the interval at zero
# direct effect, where the frontier has its corners).
FRONTIER_POINTS = 61
FRONTIER_MARGIN = 0.25
# When the breakdown lies beyond the stated set (1 < t* ≤ SCALE_MAX), a second curve runs to
# this multiple of t*, so a figure can show the stated set and the breakdown together.
EXTEND_FACTOR = 1.15
UNITS = ("", "rf", "sd")
CAUTION = ("Caution: sensitivity bounds hold only under the assumed range of direct effects; "
           "they do not prove that the instrument is valid, and a wider violation than assumed "
           "can overturn any conclusion shown here.")


# ============================================================================ direct-effect sets
@dataclass(frozen=True, slots=True)
class RangeSpec:
    """A ``--direct LOW:HIGH[unit]`` range before conversion to outcome units."""

    low: float
    high: float
    unit: str  # "" (outcome units), "rf" (share of reduced form), "sd" (SD units)

    def text(self) -> str:
        return f"{self.low:g}:{self.high:g}{self.unit}"


_RANGE = re.compile(r"^\s*([^:]+):([^:]*?[0-9.])\s*([a-zA-Z]*)\s*$")


def parse_range(text: str) -> RangeSpec:
    """Parse ``LOW:HIGH`` with an optional unit suffix ``rf`` or ``sd``.

    Examples
    --------
    >>> parse_range("-0.2:0.2rf")
    RangeSpec(low=-0.2, high=0.2, unit='rf')
    """
    match = _RANGE.match(text)
    if not match:
        raise InputError(f"--direct '{text}' is not a range; write LOW:HIGH, e.g. "
                         "--direct=-0.01:0.01 (outcome units), -0.2:0.2rf or -0.1:0.1sd")
    low_text, high_text, unit = match.groups()
    if unit not in UNITS:
        raise InputError(f"--direct '{text}' has unknown unit suffix '{unit}'; use none "
                         "(outcome units), 'rf' (share of the reduced-form coefficient) or "
                         "'sd' (outcome SDs per instrument SD)")
    try:
        low, high = float(low_text), float(high_text)
    except ValueError as exc:
        raise InputError(f"--direct '{text}': LOW and HIGH must be numbers") from exc
    if not (math.isfinite(low) and math.isfinite(high)):
        raise InputError(f"--direct '{text}': the range must be finite")
    if low > high:
        raise InputError(f"--direct '{text}': LOW {low:g} exceeds HIGH {high:g}; write "
                         f"{high:g}:{low:g}")
    return RangeSpec(low, high, unit)


@dataclass(frozen=True, slots=True)
class Scale:
    """Units for reading direct effects: reduced-form coefficients and SDs."""

    instruments: tuple[str, ...]
    reduced_form: np.ndarray
    outcome_sd: float
    instrument_sd: np.ndarray

    def to_outcome(self, k: int, value: float, unit: str) -> float:
        if unit == "rf":
            return value * float(self.reduced_form[k])
        if unit == "sd":
            return value * self.outcome_sd / float(self.instrument_sd[k])
        return value

    def in_units(self, k: int, value: float, unit: str) -> float:
        if unit == "rf":
            rf = float(self.reduced_form[k])
            return value / rf if rf != 0 else math.copysign(math.inf, value) if value else 0.0
        if unit == "sd":
            return value * float(self.instrument_sd[k]) / self.outcome_sd
        return value


@dataclass(frozen=True, slots=True)
class DirectSet:
    """A convex polytope Γ of direct effects (one coordinate per instrument).

    ``vertices`` are its extreme points; ``constraints``/``rhs`` describe it as
    ``constraints @ γ ≤ rhs``; ``box`` is set when Γ is a product of ranges.
    """

    instruments: tuple[str, ...]
    vertices: np.ndarray
    constraints: np.ndarray
    rhs: np.ndarray
    box: tuple[Interval, ...] | None = None

    @property
    def bounding_box(self) -> tuple[Interval, ...]:
        return tuple(Interval(float(lo), float(hi))
                     for lo, hi in zip(self.vertices.min(axis=0), self.vertices.max(axis=0)))

    @property
    def is_zero(self) -> bool:
        return bool(np.all(self.vertices == 0.0))


def check_range_count(count: int, instruments: Sequence[str]) -> None:
    """One ``--direct`` range per instrument, or an InputError saying so."""
    if count != len(instruments):
        raise InputError(f"{count} --direct range(s) for {len(instruments)} instrument(s) "
                         f"({', '.join(instruments)}); give one per instrument, in instrument "
                         "order")


def box_set(instruments: Sequence[str], ranges: Sequence[tuple[float, float]]) -> DirectSet:
    """Γ = ``[low₁, high₁] × … × [low_k, high_k]`` in outcome units.

    Examples
    --------
    >>> box_set(["z"], [(-0.1, 0.2)]).vertices.ravel().tolist()
    [-0.1, 0.2]
    """
    instruments = tuple(instruments)
    check_range_count(len(ranges), instruments)
    lows = np.array([r[0] for r in ranges], float)
    highs = np.array([r[1] for r in ranges], float)
    if np.any(lows > highs):
        raise InputError("a direct-effect range has LOW above HIGH; swap them")
    corners = np.array(list(itertools.product(*[(lo, hi) for lo, hi in zip(lows, highs)])))
    corners = np.unique(corners, axis=0)
    k = len(instruments)
    constraints = np.vstack([np.eye(k), -np.eye(k)])
    rhs = np.concatenate([highs, -lows])
    return DirectSet(instruments, corners, constraints, rhs,
                     tuple(Interval(lo, hi) for lo, hi in zip(lows, highs)))


def polytope_set(instruments: Sequence[str], constraints: np.ndarray,
                 rhs: np.ndarray) -> DirectSet:
    """Γ = ``{γ : constraints @ γ ≤ rhs}``; must be non-empty and bounded.

    Feasibility and boundedness are checked with linear programmes (cvxpy); the vertices are
    enumerated from active sets (exact for the small ``k_z`` of IV designs).
    """
    instruments = tuple(instruments)
    a = np.atleast_2d(np.asarray(constraints, float))
    b = np.asarray(rhs, float).ravel()
    k = len(instruments)
    if a.shape[0] == 0:
        raise InputError("the direct-effect polytope has no constraints; add rows a'γ ≤ b")
    if a.shape[1] != k or b.size != a.shape[0]:
        raise InputError(f"the direct-effect polytope needs {k} coefficient column(s) (one per "
                         "instrument) and one bound per row")
    if k > MAX_VERTEX_RANK:
        raise InputError(f"polytopes are supported for up to {MAX_VERTEX_RANK} instruments; "
                         "use a box (--direct per instrument)")
    _check_polytope_lp(instruments, a, b)
    vertices = []
    for rows in itertools.combinations(range(a.shape[0]), k):
        sub = a[list(rows)]
        if abs(np.linalg.det(sub)) < 1e-12 * max(1.0, np.abs(sub).max() ** k):
            continue
        v = np.linalg.solve(sub, b[list(rows)])
        slack = VERTEX_TOL * (1.0 + np.abs(b) + np.abs(a) @ np.abs(v))
        if np.all(a @ v <= b + slack):
            vertices.append(v)
    verts = np.unique(np.round(np.array(vertices), 14), axis=0)
    return DirectSet(instruments, verts, a, b, None)


def _check_polytope_lp(instruments: tuple[str, ...], a: np.ndarray, b: np.ndarray) -> None:
    import cvxpy as cp

    from sensiv.partial_id.solver import solve

    # Programme (per instrument k and direction): maximise ±γ_k subject to A γ ≤ b.
    gamma = cp.Variable(len(instruments))
    direction = cp.Parameter(len(instruments))
    problem = cp.Problem(cp.Maximize(direction @ gamma), [a @ gamma <= b])
    assert problem.is_dcp(dpp=True)
    for k, name in enumerate(instruments):
        for sign in (1.0, -1.0):
            e = np.zeros(len(instruments))
            e[k] = sign
            direction.value = e
            sol = solve(problem, what="direct-effect polytope check")
            if sol.outcome == "infeasible":
                raise InputError("the direct-effect polytope is empty (its constraints "
                                 "contradict each other); check the rows a'γ ≤ b")
            if sol.outcome == "unbounded":
                raise InputError(f"the direct-effect polytope is unbounded in the direction of "
                                 f"instrument '{name}'; add constraints that bound it")


def read_polytope(path, instruments: Sequence[str]) -> DirectSet:
    """Read a polytope from a CSV file: one column per instrument (header = instrument names)
    plus a column ``bound``; each row states ``Σ_k coef_k·γ_k ≤ bound``."""
    import pandas as pd

    from pathlib import Path

    p = Path(path)
    if not p.is_file():
        raise InputError(f"polytope file '{path}' does not exist; check the path")
    try:
        frame = pd.read_csv(p)
    except Exception as exc:  # pandas raises several parser error types
        raise InputError(f"polytope file '{path}' could not be read as CSV: {exc}") from exc
    missing = [c for c in (*instruments, "bound") if c not in frame.columns]
    if missing:
        raise InputError(f"polytope file '{path}' lacks column(s) {', '.join(missing)}; it needs "
                         f"one column per instrument ({', '.join(instruments)}) and 'bound'")
    if frame.empty:
        raise InputError(f"polytope file '{path}' has no rows; add rows a'γ ≤ bound")
    block = frame[[*instruments, "bound"]]
    values = block.apply(pd.to_numeric, errors="coerce")
    if values.isna().any().any() or not np.isfinite(values.to_numpy()).all():
        raise InputError(f"polytope file '{path}' has non-numeric or missing entries; every "
                         "cell must be a finite number")
    return polytope_set(instruments, values[list(instruments)].to_numpy(float),
                        values["bound"].to_numpy(float))


# ============================================================================ the linear core
@dataclass(frozen=True, slots=True)
class Core:
    """``β̂(γ) = estimate − slope'γ`` and ``Var β̂(γ) = [1, −γ'] quad [1, −γ']'``.

    ``critical`` is the two-sided Wald critical value used for every interval.
    """

    focus: str
    instruments: tuple[str, ...]
    estimate: float
    slope: np.ndarray
    quad: np.ndarray
    critical: float

    def beta(self, gammas: np.ndarray) -> np.ndarray:
        return self.estimate - np.atleast_2d(gammas) @ self.slope

    def variance(self, gammas: np.ndarray) -> np.ndarray:
        g = np.atleast_2d(gammas)
        q = self.quad
        out = q[0, 0] - 2.0 * g @ q[0, 1:] + np.einsum("ij,jk,ik->i", g, q[1:, 1:], g)
        return np.maximum(out, 0.0)

    def interval(self, gamma: np.ndarray) -> Interval:
        b = float(self.beta(gamma)[0])
        half = self.critical * math.sqrt(float(self.variance(gamma)[0]))
        return Interval(b - half, b + half)

    @property
    def se(self) -> float:
        return math.sqrt(float(self.quad[0, 0]))


def focus_index(treatments: Sequence[str], focus: str | None) -> int:
    """Position of the ``--focus`` treatment (the first when ``None``); InputError otherwise."""
    if focus is None:
        return 0
    if focus not in treatments:
        raise InputError(f"--focus '{focus}' is not a treatment; choose one of "
                         f"{', '.join(treatments)}")
    return treatments.index(focus)


def _slope_and_residual_maps(pieces: iv.Pieces, j: int) -> tuple[np.ndarray, np.ndarray]:
    """``a`` (k_z,) for treatment ``j`` and the row map ``[û, M]`` of ``u(γ) = û − Mγ``."""
    d = pieces.design
    fit = pieces.tsls
    full = fit.bread @ (fit.fitted.T @ pieces.gram @ d.z)      # (k_r, k_z)
    row = len(d.control_names) + j
    residual_maps = np.column_stack([fit.residual, d.z - d.regressors @ full])
    return full[row], residual_maps


def focus_block(pieces: iv.Pieces, j: int) -> ScoreBlock:
    """Pass-2 request for the robust/cluster variance quadratic of treatment ``j``."""
    _, maps = _slope_and_residual_maps(pieces, j)
    row = len(pieces.design.control_names) + j
    influence = pieces.tsls.fitted @ pieces.tsls.bread[:, row]
    return ScoreBlock("focus", influence[:, None], maps)


def build_core(pieces: iv.Pieces, sums: ScoreSums | None, result: iv.IVFit, j: int) -> Core:
    """The linear/quadratic core of the focus coefficient from the fit's moments and sums."""
    slope, maps = _slope_and_residual_maps(pieces, j)
    n = pieces.n
    k = pieces.tsls.params.size
    se = result.se_type
    n_clusters = sums.n_clusters if sums is not None else None
    factor = small_factor(se, result.small, n, k, n_clusters)
    row = len(pieces.design.control_names) + j
    if se == "classic":
        quad = pieces.tsls.bread[row, row] * (maps.T @ pieces.gram @ maps) / n
    else:
        quad = sums.meats["focus"]
    quad = factor * quad
    return Core(pieces.design.treatments[j], pieces.design.instruments,
                float(result.tsls.value(pieces.design.treatments[j])), slope,
                0.5 * (quad + quad.T), result.critical_value())


# ============================================================================ exact computations
def quadratic_roots(a2: float, a1: float, a0: float) -> np.ndarray:
    """Real roots of ``a2 t² + a1 t + a0`` (numerically stable; degenerate cases handled).

    Examples
    --------
    >>> quadratic_roots(1.0, -3.0, 2.0).tolist()
    [1.0, 2.0]
    """
    scale = max(abs(a2), abs(a1), abs(a0))
    if scale == 0.0:
        return np.array([])
    if abs(a2) <= ROOT_TOL * scale:
        if abs(a1) <= ROOT_TOL * scale:
            return np.array([])
        return np.array([-a0 / a1])
    disc = a1 * a1 - 4.0 * a2 * a0
    if disc < 0:
        if disc > -ROOT_TOL * a1 * a1:
            return np.array([-a1 / (2.0 * a2)])
        return np.array([])
    q = -0.5 * (a1 + math.copysign(math.sqrt(disc), a1 if a1 != 0 else 1.0))
    roots = [q / a2]
    if q != 0.0:
        roots.append(a0 / q)
    return np.sort(np.array(roots))


def union_interval(core: Core, vertices: np.ndarray, scale: float = 1.0) -> Interval:
    """Union of the γ-specific Wald intervals over ``scale·Γ`` — exact, from the vertices."""
    lo, hi = union_curve(core, vertices, np.array([scale]))
    return Interval(float(lo[0]), float(hi[0]))


def union_curve(core: Core, vertices: np.ndarray, scales: np.ndarray) -> tuple[np.ndarray,
                                                                                 np.ndarray]:
    """Union interval ends for every scale (vectorised over scales × vertices)."""
    scales = np.asarray(scales, float)
    av = vertices @ core.slope                                      # (m,)
    qv = vertices @ core.quad[0, 1:]                                # (m,)
    wv = np.einsum("ij,jk,ik->i", vertices, core.quad[1:, 1:], vertices)
    t = scales[:, None]
    beta = core.estimate - t * av
    var = np.maximum(core.quad[0, 0] - 2.0 * t * qv + t * t * wv, 0.0)
    half = core.critical * np.sqrt(var)
    return (beta - half).min(axis=1), (beta + half).max(axis=1)


def identified_curve(core: Core, vertices: np.ndarray, scales: np.ndarray) -> tuple[
        np.ndarray, np.ndarray]:
    """Identified set ``{β̂ − a'γ : γ ∈ tΓ}`` for every scale ``t`` (linear, so vertices)."""
    av = vertices @ core.slope
    scales = np.asarray(scales, float)
    return core.estimate - scales * av.max(), core.estimate - scales * av.min()


def identified_set_lp(core: Core, dset: DirectSet) -> Interval:
    """Identified set over a polytope by two linear programmes (cvxpy).

    Programme: minimise / maximise ``β̂ − a'γ`` over ``γ`` subject to ``A γ ≤ b``.
    """
    import cvxpy as cp

    from sensiv.partial_id.solver import solve

    gamma = cp.Variable(len(dset.instruments))
    cons = [dset.constraints @ gamma <= dset.rhs]
    low = solve(cp.Problem(cp.Minimize(core.estimate - core.slope @ gamma), cons),
                what="identified-set programme")
    high = solve(cp.Problem(cp.Maximize(core.estimate - core.slope @ gamma), cons),
                 what="identified-set programme")
    return Interval(low.value, high.value)


def _touching_roots(core: Core, threshold: float, av: float, qv: float, wv: float) -> np.ndarray:
    """Roots in ``t`` of ``(β̂ − θ₀ − t·av)² = c²(Q₀₀ − 2t·qv + t²·wv)``."""
    d = core.estimate - threshold
    c2 = core.critical**2
    return quadratic_roots(av * av - c2 * wv, -2.0 * d * av + 2.0 * c2 * qv,
                           d * d - c2 * core.quad[0, 0])


def breakdown_scale(core: Core, vertices: np.ndarray, threshold: float) -> float | None:
    """Smallest ``t ≥ 0`` at which the union interval over ``tΓ`` reaches ``threshold``.

    ``0.0`` when the ordinary interval already contains the threshold; ``None`` when the
    interval stays clear of it for every ``t ≤`` :data:`SCALE_MAX`.
    """
    base = core.interval(np.zeros(len(core.instruments)))
    if base.contains(threshold):
        return 0.0
    side = 1.0 if base.low > threshold else -1.0
    best = math.inf
    d = core.estimate - threshold
    for v in vertices:
        av = float(v @ core.slope)
        qv = float(v @ core.quad[0, 1:])
        wv = float(v @ core.quad[1:, 1:] @ v)
        for t in _touching_roots(core, threshold, av, qv, wv):
            gap = side * (d - t * av)
            if 0.0 < t <= SCALE_MAX and gap >= -ROOT_TOL * (abs(d) + abs(t * av)):
                best = min(best, float(t))
    return None if math.isinf(best) else best


def direct_breakdown(core: Core, threshold: float) -> tuple[list[float | None],
                                                              list[float | None]]:
    """Per instrument alone: the direct effects nearest zero, below and above, at which the
    γ-specific interval reaches ``threshold`` (exact roots; ``None`` when there is none)."""
    lower, upper = [], []
    for k in range(len(core.instruments)):
        roots = _touching_roots(core, threshold, float(core.slope[k]),
                                float(core.quad[0, 1 + k]), float(core.quad[1 + k, 1 + k]))
        neg = [float(r) for r in roots if r < 0]
        pos = [float(r) for r in roots if r > 0]
        lower.append(max(neg) if neg else None)
        upper.append(min(pos) if pos else None)
    return lower, upper


# ============================================================================ weak-IV-robust set
def merge_intervals(pieces: Sequence[Interval]) -> tuple[Interval, ...]:
    """Union of intervals as sorted, disjoint pieces."""
    out: list[list[float]] = []
    for p in sorted(pieces, key=lambda p: (p.low, p.high)):
        if out and p.low <= out[-1][1]:
            out[-1][1] = max(out[-1][1], p.high)
        else:
            out.append([p.low, p.high])
    return tuple(Interval(lo, hi) for lo, hi in out)


@dataclass(frozen=True, slots=True)
class ReducedForm:
    """Reduced-form and first-stage coefficients on the instruments and their joint covariance
    (one treatment): ``rho`` for the outcome, ``pi`` for the treatment."""

    rho: np.ndarray
    pi: np.ndarray
    v_rr: np.ndarray
    v_rp: np.ndarray
    v_pp: np.ndarray
    critical: float


def reduced_form(pieces: iv.Pieces, sums: ScoreSums | None, result: iv.IVFit) -> ReducedForm:
    meats = sums.meats if sums is not None else {}
    n_clusters = sums.n_clusters if sums is not None else None
    joint = first_stage_covariance(pieces, meats.get("first"), result.se_type, result.small,
                                   n_clusters)
    d = pieces.design
    zt = pieces.z_partialled
    coef = linalg.sym_inv_psd(zt.T @ pieces.gram @ zt) @ (
        zt.T @ pieces.gram @ np.column_stack([d.x, d.y]))
    k_z = zt.shape[1]
    level = result.confidence_level
    if result.small:
        critical = k_z * dist.f_quantile(level, k_z, pieces.n - d.instrument_set.shape[1])
    else:
        critical = dist.chi2_quantile(level, k_z)
    e = coef.shape[1] - 1  # index of the outcome equation
    return ReducedForm(coef[:, e], coef[:, 0], joint[e, :, e, :], joint[e, :, 0, :],
                       joint[0, :, 0, :], critical)


def _ar_minimiser(rf: ReducedForm, dset: DirectSet):
    """``β₀ ↦ min_{γ∈Γ} (ρ − β₀π − γ)' V(β₀)⁻¹ (ρ − β₀π − γ)``.

    A box uses bounded least squares (BVLS, exact); a general polytope a quadratic programme
    built once with cvxpy Parameters and re-solved for each ``β₀``.
    """
    k = len(rf.rho)

    def whitened(beta0: float) -> tuple[np.ndarray, np.ndarray]:
        a = rf.rho - beta0 * rf.pi
        v = rf.v_rr - beta0 * (rf.v_rp + rf.v_rp.T) + beta0**2 * rf.v_pp
        whiten = linalg.scaled_cholesky(v).whiten(np.eye(k))
        return whiten, whiten @ a

    if dset.box is not None:
        from scipy.optimize import lsq_linear

        lows = np.array([b.low for b in dset.box])
        highs = np.array([b.high for b in dset.box])
        free = lows < highs

        def box_min(beta0: float) -> float:
            whiten, target = whitened(beta0)
            r0 = target - whiten[:, ~free] @ lows[~free]
            if not free.any():
                return float(r0 @ r0)
            res = lsq_linear(whiten[:, free], r0, bounds=(lows[free], highs[free]),
                             method="bvls", tol=1e-14)
            r = r0 - whiten[:, free] @ res.x
            return float(r @ r)

        return box_min

    import cvxpy as cp

    from sensiv.partial_id.solver import solve

    # Programme: minimise ‖t − P γ‖² over γ subject to A γ ≤ b, with P (whitening of V(β₀))
    # and t (whitened ρ − β₀π) as parameters, so the problem is compiled once.
    gamma = cp.Variable(k)
    p_par = cp.Parameter((k, k))
    t_par = cp.Parameter(k)
    problem = cp.Problem(cp.Minimize(cp.sum_squares(t_par - p_par @ gamma)),
                         [dset.constraints @ gamma <= dset.rhs])
    assert problem.is_dcp(dpp=True)

    def polytope_min(beta0: float) -> float:
        p_par.value, t_par.value = whitened(beta0)
        return solve(problem, solver="CLARABEL", what="weak-IV-robust programme").value

    return polytope_min


def robust_set(rf: ReducedForm, dset: DirectSet) -> tuple[tuple[Interval, ...], str]:
    """``{β₀ : min_{γ∈Γ} AR(β₀, γ) ≤ χ²}`` for one treatment; returns pieces and the method.

    One instrument, Γ = [l, h]: the set is exactly the union of the AR sets at ``γ = l`` and
    ``γ = h`` and of ``{β₀ : l ≤ ρ − β₀π ≤ h}`` (the minimum over γ is the squared distance of
    ``ρ − β₀π`` to ``[l, h]``).  Several instruments: the minimum over Γ is a small quadratic
    programme per ``β₀``; the set's boundary is located on a grid and refined by root finding.
    """
    if len(rf.rho) == 1:
        lo = float(dset.vertices.min())
        hi = float(dset.vertices.max())
        pieces = []
        for g in (lo, hi):
            pieces.extend(linalg.quadratic_ratio_set(rf.rho - g, rf.pi, rf.v_rr, rf.v_rp,
                                                     rf.v_pp, rf.critical))
        pi, rho = float(rf.pi[0]), float(rf.rho[0])
        if pi != 0.0:
            ends = sorted(((rho - hi) / pi, (rho - lo) / pi))
            pieces.append(Interval(ends[0], ends[1]))
        elif lo <= rho <= hi:
            pieces.append(Interval(-math.inf, math.inf))
        return merge_intervals(pieces), "exact"
    return _robust_set_numeric(rf, dset), "grid with root refinement"


def _robust_set_numeric(rf: ReducedForm, dset: DirectSet) -> tuple[Interval, ...]:
    from scipy.optimize import brentq

    minimum = _ar_minimiser(rf, dset)

    def g(b: float) -> float:
        return minimum(b) - rf.critical

    # Exact pieces at the vertices locate the region; the set is unbounded exactly when the
    # first-stage Wald statistic π'V_ππ⁻¹π is at most the critical value.
    vertex_pieces = []
    for v in dset.vertices:
        vertex_pieces.extend(linalg.quadratic_ratio_set(rf.rho - v, rf.pi, rf.v_rr, rf.v_rp,
                                                        rf.v_pp, rf.critical))
    unbounded = linalg.wald_statistic(rf.pi, rf.v_pp) <= rf.critical
    finite = [e for p in vertex_pieces for e in (p.low, p.high) if math.isfinite(e)]
    center = float(rf.rho @ rf.pi / (rf.pi @ rf.pi))
    finite.append(center)
    lo, hi = min(finite), max(finite)
    width = max(hi - lo, 1e-8 * max(1.0, abs(center)))
    lo, hi = lo - 2 * width, hi + 2 * width
    while not unbounded and (g(lo) <= 0 or g(hi) <= 0):
        lo, hi = lo - 2 * (hi - lo), hi + 2 * (hi - lo)
    grid = np.linspace(lo, hi, AR_GRID if dset.box is not None else AR_GRID_POLYTOPE)
    values = np.array([g(b) for b in grid])
    inside = values <= 0
    edges = []
    for i in range(len(grid) - 1):
        if inside[i] != inside[i + 1]:
            edges.append(brentq(g, grid[i], grid[i + 1], xtol=1e-14 * max(1.0, abs(grid[i]))))
    pieces = []
    start = -math.inf if (inside[0] and unbounded) else None
    if inside[0] and not unbounded:
        start = grid[0]
    it = iter(edges)
    for i in range(len(grid) - 1):
        if inside[i] != inside[i + 1]:
            e = next(it)
            if inside[i + 1]:
                start = e
            else:
                pieces.append(Interval(start, e))
                start = None
    if start is not None:
        pieces.append(Interval(start, math.inf if unbounded else grid[-1]))
    return merge_intervals(pieces)


# ============================================================================ the sweep
@dataclass(frozen=True, slots=True)
class Breakdown:
    """Where the conclusion ``β ≷ threshold`` breaks."""

    threshold: float
    scale: float | None
    direct_lower: tuple[float | None, ...]
    direct_upper: tuple[float | None, ...]
    conclusion: str

    def to_dict(self) -> dict:
        return {"threshold": self.threshold, "scale": json_number(self.scale),
                "direct_lower": [json_number(v) for v in self.direct_lower],
                "direct_upper": [json_number(v) for v in self.direct_upper],
                "conclusion": self.conclusion}


@dataclass(frozen=True, slots=True)
class Curve:
    """Union interval and identified set for scalings ``t`` of Γ."""

    scale: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    id_lower: np.ndarray
    id_upper: np.ndarray

    def to_list(self) -> list[dict]:
        return [{"scale": float(t), "lower": json_number(lo), "upper": json_number(hi),
                 "id_lower": json_number(il), "id_upper": json_number(iu)}
                for t, lo, hi, il, iu in zip(self.scale, self.lower, self.upper, self.id_lower,
                                              self.id_upper)]


@dataclass(frozen=True, slots=True)
class Frontier:
    """Breakdown of ``β > θ`` (or ``β < θ``) for a range of thresholds ``θ``.

    Row ``i`` describes ``threshold[i]``:

    * ``side``: ``+1`` when the interval at zero direct effect lies above the threshold (the
      conclusion is ``β > θ``), ``−1`` when below (``β < θ``), ``0`` when it contains it (no
      conclusion to break);
    * ``scale``: the breakdown scale ``t*(θ)`` of the set (:func:`breakdown_scale`): ``0`` when
      ``side`` is 0, ``inf`` when the union stays clear of ``θ`` up to :data:`SCALE_MAX`;
    * ``direct_lower``/``direct_upper`` (shape ``(m, k_z)``): for each instrument alone, the
      direct effects nearest zero below and above at which the interval reaches ``θ``
      (:func:`direct_breakdown`); ``∓inf`` when there is none on that side.
    """

    threshold: np.ndarray
    scale: np.ndarray
    side: np.ndarray
    direct_lower: np.ndarray
    direct_upper: np.ndarray

    def to_list(self) -> list[dict]:
        return [{"threshold": float(th), "scale": json_number(t),
                 "conclusion": {1: ">", -1: "<", 0: "none"}[int(s)],
                 "direct_lower": [json_number(v) for v in lo],
                 "direct_upper": [json_number(v) for v in hi]}
                for th, t, s, lo, hi in zip(self.threshold, self.scale, self.side,
                                            self.direct_lower, self.direct_upper)]


def frontier_thresholds(union: Interval, threshold: float, base: Interval,
                        points: int = FRONTIER_POINTS) -> np.ndarray:
    """Thresholds for the frontier: symmetric about the estimate (the centre of ``base``, the
    interval at zero direct effect), reaching the union interval at scale 1 and the threshold
    with :data:`FRONTIER_MARGIN` of that reach to spare; plus ``threshold`` and the ends of
    ``base`` (the frontier's corners).

    Examples
    --------
    >>> frontier_thresholds(Interval(0.0, 2.0), 0.5, Interval(0.8, 1.2), points=3).tolist()
    [-0.25, 0.5, 0.8, 1.0, 1.2, 2.25]
    """
    centre = 0.5 * (base.low + base.high)
    ends = [threshold, base.low, base.high]
    reach = max(abs(e - centre) for e in [*ends, union.low, union.high] if math.isfinite(e))
    if not reach > 0.0:
        reach = max(abs(centre), 1.0)
    reach *= 1.0 + FRONTIER_MARGIN
    grid = np.linspace(centre - reach, centre + reach, points)
    return np.unique(np.concatenate([grid, ends]))


def breakdown_frontier(core: Core, vertices: np.ndarray, thresholds: np.ndarray, *,
                       uninformative: bool = False) -> Frontier:
    """The breakdown scale and the per-instrument breakdown direct effects for every threshold
    (exact roots, as for the single threshold of the sweep).

    With an ``uninformative`` first stage the union interval is unbounded at every scale, so
    the breakdown scale is 0 throughout (as in :func:`analyse`).

    Examples
    --------
    >>> core = Core("x", ("z",), 1.0, np.array([1.0]), np.diag([0.01, 0.0]), 1.96)
    >>> f = breakdown_frontier(core, np.array([[-0.5], [0.5]]), np.array([0.0, 1.0, 2.0]))
    >>> f.side.tolist(), f.scale.round(4).tolist()
    ([1, 0, -1], [1.608, 0.0, 1.608])
    """
    thresholds = np.asarray(thresholds, float)
    k = len(core.instruments)
    base = core.interval(np.zeros(k))
    scale = np.empty(thresholds.size)
    side = np.zeros(thresholds.size, dtype=int)
    lower = np.empty((thresholds.size, k))
    upper = np.empty((thresholds.size, k))
    for i, theta in enumerate(thresholds):
        theta = float(theta)
        if not base.contains(theta):
            side[i] = 1 if base.low > theta else -1
        t_star = 0.0 if uninformative else breakdown_scale(core, vertices, theta)
        scale[i] = math.inf if t_star is None else t_star
        lo, hi = direct_breakdown(core, theta)
        lower[i] = [-math.inf if v is None else v for v in lo]
        upper[i] = [math.inf if v is None else v for v in hi]
    return Frontier(thresholds, scale, side, lower, upper)


@dataclass(frozen=True, slots=True)
class SweepResult:
    """Direct-effect sensitivity of the focus coefficient over a set Γ and its scalings."""

    focus: str
    outcome: str
    instruments: tuple[str, ...]
    n: int
    se_type: str
    confidence_level: float
    estimate: float
    se: float
    direct_set: tuple[Interval, ...]
    direct_set_rf: tuple[Interval, ...]
    direct_set_sd: tuple[Interval, ...]
    range_text: tuple[str, ...]
    polytope: bool
    identified_set: Interval
    union_ci: Interval
    union_ci_wald: Interval
    breakdown: Breakdown
    curve: Curve
    ar_set: tuple[Interval, ...] | None
    ar_method: str | None
    scale: Scale
    fit: iv.IVFit
    notes: tuple[str, ...] = field(default=())
    frontier: Frontier | None = None
    curve_extended: Curve | None = None
    adaptive: object | None = None  # sensiv.sensitivity.adaptive.AdaptiveResult with ``adaptive=True``

    def assumptions(self) -> list[str]:
        ranges = ", ".join(f"{z} in {r}" for z, r in zip(self.instruments, self.direct_set))
        shape = "a polytope with bounding box" if self.polytope else "a box"
        return [
            f"direct effect of each instrument on {self.outcome} (holding the treatment "
            f"fixed) lies in {shape}: {ranges} (outcome units)",
            "apart from that direct effect, the instruments are as good as randomly assigned "
            "given the controls",
            "linear model with a constant treatment effect",
            f"{self.se_type} covariance at every direct effect; union of "
            f"{100 * self.confidence_level:g}% intervals covers β at least at that rate when "
            "the true direct effect lies in the set",
        ]

    def to_dict(self) -> dict:
        return {
            "focus": self.focus,
            "estimate": self.estimate,
            "se": self.se,
            "n": self.n,
            "se_type": self.se_type,
            "confidence_level": self.confidence_level,
            "direct_set": [i.to_list() for i in self.direct_set],
            "direct_set_rf": [i.to_list() for i in self.direct_set_rf],
            "direct_set_sd": [i.to_list() for i in self.direct_set_sd],
            "direct_ranges": list(self.range_text),
            "polytope": self.polytope,
            "identified_set": self.identified_set.to_list(),
            "union_ci": self.union_ci.to_list(),
            "union_ci_wald": self.union_ci_wald.to_list(),
            "breakdown": self.breakdown.to_dict(),
            "curve": self.curve.to_list(),
            "frontier": self.frontier.to_list() if self.frontier is not None else None,
            "curve_extended": (self.curve_extended.to_list()
                               if self.curve_extended is not None else None),
            **(self._adaptive_keys()),
            "ar_set": intervals_to_lists(self.ar_set) if self.ar_set is not None else None,
            "ar_method": self.ar_method,
            "scale": {"reduced_form": dict(zip(self.instruments,
                                               map(float, self.scale.reduced_form))),
                      "outcome_sd": self.scale.outcome_sd,
                      "instrument_sd": dict(zip(self.instruments,
                                                map(float, self.scale.instrument_sd)))},
            "overid": self.fit.overid.to_dict() if self.fit.overid else None,
            "first_stage_f": {fs.treatment: json_number(fs.f) for fs in self.fit.first_stages},
            "notes": list(self.notes),
            "assumptions": self.assumptions(),
            "caution": CAUTION,
        }

    def _adaptive_keys(self) -> dict:
        if self.adaptive is None:
            return {}
        document = self.adaptive.to_dict()
        return {"adaptive_set": document["adaptive_set"],
                "min_relaxation": document["min_relaxation"], "adaptive": document}

    def __str__(self) -> str:
        return describe(self)


def _scale(pieces: iv.Pieces, rf_coef: np.ndarray) -> Scale:
    m = pieces.moments
    return Scale(pieces.design.instruments, rf_coef,
                 math.sqrt(m.variance(pieces.design.outcome)),
                 np.array([math.sqrt(m.variance(z)) for z in pieces.design.instruments]))


def _reduced_form_coef(pieces: iv.Pieces) -> np.ndarray:
    d = pieces.design
    zt = pieces.z_partialled
    return linalg.sym_inv_psd(zt.T @ pieces.gram @ zt) @ (zt.T @ pieces.gram @ d.y)


def resolve_ranges(ranges: Sequence[RangeSpec], scale: Scale) -> DirectSet:
    """Convert ``--direct`` ranges to outcome units and build the box Γ."""
    check_range_count(len(ranges), scale.instruments)
    out = []
    for j, r in enumerate(ranges):
        a, b = scale.to_outcome(j, r.low, r.unit), scale.to_outcome(j, r.high, r.unit)
        out.append((min(a, b), max(a, b)))
    return box_set(scale.instruments, out)


def _in_units(dset: DirectSet, scale: Scale, unit: str) -> tuple[Interval, ...]:
    out = []
    for k, box in enumerate(dset.bounding_box):
        a, b = scale.in_units(k, box.low, unit), scale.in_units(k, box.high, unit)
        out.append(Interval(min(a, b), max(a, b)))
    return tuple(out)


def first_stage_is_uninformative(result: iv.IVFit, j: int) -> bool:
    """True when the focus treatment's first stage is not significant at the confidence level.

    Then the data cannot rule out a zero first stage, every valid confidence set for β must be
    unbounded (Dufour 1997), and the finite Wald arithmetic is reported only as a reference.
    """
    fs = result.first_stages[j]
    k_z = fs.f_df[0]
    if result.small:
        critical = dist.f_quantile(result.confidence_level, k_z, fs.f_df[1])
        return not fs.f > critical
    return not fs.f * k_z > dist.chi2_quantile(result.confidence_level, k_z)


def sweep(data, spec=None, *, direct: Sequence[RangeSpec | str] | None = None,
          polytope: str | None = None, se: str | None = None, confidence_level: float = 0.95,
          small: bool = False, threshold: float = 0.0, points: int = DEFAULT_POINTS,
          focus: str | None = None, adaptive: bool = False,
          chunk_rows: int | None = None) -> SweepResult:
    """Direct-effect sensitivity analysis from data (two passes over the rows, then closed forms).

    Parameters
    ----------
    data : sensiv.data source, DataFrame or path
    spec : sensiv.data.Spec, optional
    direct : sequence of RangeSpec or str
        One range per instrument, e.g. ``"-0.01:0.01"``, ``"-0.2:0.2rf"``, ``"-0.1:0.1sd"``.
    polytope : path, optional
        CSV polytope (instead of ``direct``).
    threshold : float
        The conclusion examined is ``β > threshold`` (or ``<``, whichever the data support).
    points : int
        Curve points over scalings ``t ∈ [0, 1]`` of the set.
    adaptive : bool
        Add the falsification adaptive set of Masten & Poirier (2021) (one treatment; with one
        instrument it is the 2SLS point).

    Returns
    -------
    SweepResult
    """
    if (direct is None) == (polytope is None):
        raise InputError("give either one --direct range per instrument or --direct-polytope "
                         "FILE (not both, not neither)")
    ranges = [parse_range(r) if isinstance(r, str) else r for r in (direct or [])]
    if not isinstance(points, int) or points < 2:
        raise InputError(f"--points {points} is too small; give at least 2 curve points")
    if not math.isfinite(threshold):
        raise InputError("--threshold must be a finite number")
    source = iv.as_source(data, spec, chunk_rows=chunk_rows)
    se = se or iv.default_se(source.spec)
    treatments = source.layout.treatments
    j = focus_index(treatments, focus)
    if ranges:
        check_range_count(len(ranges), source.layout.instruments)
    dset_file = read_polytope(polytope, source.layout.instruments) if polytope else None
    if adaptive and len(treatments) != 1:
        raise InputError(f"--adaptive needs one treatment; got {len(treatments)} "
                         f"({', '.join(treatments)}): drop --adaptive or keep one treatment")
    result, pieces, sums = iv.fit_with_pieces(
        source, se=se, confidence_level=confidence_level, small=small,
        extra_blocks=lambda p: [] if se == "classic" else [focus_block(p, j)])
    return analyse(result, pieces, sums, j, ranges=ranges, dset=dset_file,
                   threshold=threshold, points=points, adaptive=adaptive)


def analyse(result: iv.IVFit, pieces: iv.Pieces, sums: ScoreSums | None, j: int, *,
            ranges: Sequence[RangeSpec] = (), dset: DirectSet | None = None,
            threshold: float = 0.0, points: int = DEFAULT_POINTS,
            adaptive: bool = False) -> SweepResult:
    """The sweep from a fit's pieces (no further pass over the rows)."""
    core = build_core(pieces, sums, result, j)
    scale = _scale(pieces, _reduced_form_coef(pieces))
    if dset is None:
        dset = resolve_ranges(ranges, scale)
    scales = np.linspace(0.0, 1.0, points)
    lo, hi = union_curve(core, dset.vertices, scales)
    id_lo, id_hi = identified_curve(core, dset.vertices, scales)
    if dset.box is None:
        ident = identified_set_lp(core, dset)
    else:
        ident = Interval(float(id_lo[-1]), float(id_hi[-1]))
    wald = Interval(float(lo[-1]), float(hi[-1]))
    notes = list(result.notes)
    union = wald
    uninformative = first_stage_is_uninformative(result, j)
    if uninformative:
        union = Interval(-math.inf, math.inf)
        lo, hi = np.full_like(lo, -np.inf), np.full_like(hi, np.inf)
        message = (f"the first stage of '{core.focus}' is not significant at the "
                   f"{100 * result.confidence_level:g}% level, so the data cannot rule out that "
                   "the instrument does not move the treatment: the union interval is "
                   "unbounded (the finite Wald arithmetic is in union_ci_wald)")
        notes.append(message)
        warnings.warn(message, WeakInstrumentWarning, stacklevel=2)
    lower, upper = direct_breakdown(core, threshold)
    t_star = 0.0 if uninformative else breakdown_scale(core, dset.vertices, threshold)
    base = core.interval(np.zeros(len(core.instruments)))
    extended = None
    if t_star is not None and t_star > 1.0:
        extended = _curve(core, dset.vertices,
                          np.linspace(0.0, min(EXTEND_FACTOR * t_star, SCALE_MAX), points),
                          uninformative)
    frontier = breakdown_frontier(core, dset.vertices,
                                  frontier_thresholds(wald, threshold, base),
                                  uninformative=uninformative)
    if uninformative or base.contains(threshold):
        conclusion = (f"none: at zero direct effect the interval already contains "
                      f"{threshold:g}")
    else:
        conclusion = f"{core.focus} effect {'>' if base.low > threshold else '<'} {threshold:g}"
    ar, ar_method, fas = None, None, None
    if len(pieces.design.treatments) == 1:
        rf = reduced_form(pieces, sums, result)
        ar, ar_method = robust_set(rf, dset)
        if adaptive:
            from sensiv.sensitivity.adaptive import adaptive_set  # imports this module: keep it lazy

            fas = adaptive_set(rf, instruments=core.instruments, scale=scale,
                               confidence_level=result.confidence_level)
        hull = (Interval(ar[0].low, ar[-1].high) if ar else None)
        if not uninformative and (hull is None or not hull.bounded or abs(
                hull.width - wald.width) > MATERIAL_SHARE * wald.width):
            message = ("the weak-instrument-robust (Anderson-Rubin) sensitivity set differs "
                       "materially from the union of Wald intervals, a sign of a weak first "
                       "stage (or of overidentifying restrictions that the data reject); "
                       "prefer the robust set")
            notes.append(message)
            warnings.warn(message, WeakInstrumentWarning, stacklevel=2)
    return SweepResult(
        focus=core.focus, outcome=pieces.design.outcome, instruments=core.instruments,
        n=result.n, se_type=result.se_type, confidence_level=result.confidence_level,
        estimate=core.estimate, se=core.se, direct_set=dset.bounding_box,
        direct_set_rf=_in_units(dset, scale, "rf"), direct_set_sd=_in_units(dset, scale, "sd"),
        range_text=tuple(r.text() for r in ranges), polytope=dset.box is None,
        identified_set=ident, union_ci=union, union_ci_wald=wald,
        breakdown=Breakdown(threshold, t_star, tuple(lower), tuple(upper), conclusion),
        curve=Curve(scales, lo, hi, id_lo, id_hi), ar_set=ar, ar_method=ar_method,
        scale=scale, fit=result, notes=tuple(dict.fromkeys(notes)), frontier=frontier,
        curve_extended=extended, adaptive=fas)


def _curve(core: Core, vertices: np.ndarray, scales: np.ndarray, uninformative: bool) -> Curve:
    """Union interval and identified set over ``scales`` (union unbounded when
    ``uninformative``)."""
    lo, hi = union_curve(core, vertices, scales)
    if uninformative:
        lo, hi = np.full_like(lo, -np.inf), np.full_like(hi, np.inf)
    id_lo, id_hi = identified_curve(core, vertices, scales)
    return Curve(scales, lo, hi, id_lo, id_hi)
