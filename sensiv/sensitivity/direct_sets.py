r"""Direct-effect sets Γ: the ranges a user states, their units, and the polytopes they span.

A ``--direct LOW:HIGH[unit]`` range is parsed into a :class:`RangeSpec`, converted to outcome
units through a :class:`Scale` (reduced-form coefficients and SDs) and assembled into a
:class:`DirectSet` — a box or a general convex polytope ``{γ : A γ ≤ b}`` with its vertices
enumerated, since every exact computation of :mod:`sensiv.sensitivity.union` needs only the
extreme points of Γ.
"""

from __future__ import annotations

import itertools
import math
import re
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from sensiv.core.errors import InputError
from sensiv.core.limits import check_magnitude
from sensiv.core.results import Interval
from sensiv.estimation import linalg
from sensiv.estimation.moments import Moments
from sensiv.partial_id.solver import solve
from sensiv.sensitivity.convex_max import CORNER_LIMIT

VERTEX_TOL = 1e-9           # feasibility slack when enumerating polytope vertices
MAX_VERTEX_RANK = 8         # enumerating vertices by active sets is for small k_z
UNITS = ("", "rf", "sd")


@dataclass(frozen=True, slots=True)
class RangeSpec:
    """A ``--direct LOW:HIGH[unit]`` range before conversion to outcome units."""

    low: float
    high: float
    unit: str  # "" (outcome units), "rf" (share of reduced form), "sd" (SD units)

    def text(self) -> str:
        return f"{self.low:g}:{self.high:g}{self.unit}"


_RANGE = re.compile(r"^\s*([^:]+):([^:]*?[0-9.])\s*([a-zA-Z]*)\s*$")


RANGE_EXAMPLES = "--direct=-0.01:0.01 (outcome units), -0.2:0.2rf or -0.1:0.1sd"
UNIT_CHOICES = ("none (outcome units), 'rf' (share of the reduced-form coefficient) or 'sd' "
                "(outcome SDs per instrument SD)")


def parse_range(text: str, option: str = "--direct", units: Sequence[str] = UNITS,
                examples: str = RANGE_EXAMPLES, choices: str = UNIT_CHOICES) -> RangeSpec:
    """Parse ``LOW:HIGH`` with an optional unit suffix among ``units`` (``rf`` or ``sd`` for
    ``--direct``); ``option``, ``examples`` and ``choices`` word the messages.

    Examples
    --------
    >>> parse_range("-0.2:0.2rf")
    RangeSpec(low=-0.2, high=0.2, unit='rf')
    """
    match = _RANGE.match(str(text))
    if not match:
        raise InputError(f"{option} '{text}' is not a range; write LOW:HIGH, e.g. {examples}")
    low_text, high_text, unit = match.groups()
    if unit not in units:
        raise InputError(f"{option} '{text}' has unknown unit suffix '{unit}'; use {choices}")
    try:
        low, high = float(low_text), float(high_text)
    except ValueError as exc:
        raise InputError(f"{option} '{text}': LOW and HIGH must be numbers") from exc
    if not (math.isfinite(low) and math.isfinite(high)):
        raise InputError(f"{option} '{text}': the range must be finite")
    check_magnitude(low, f"{option} '{text}': LOW")
    check_magnitude(high, f"{option} '{text}': HIGH")
    if low > high:
        raise InputError(f"{option} '{text}': LOW {low:g} exceeds HIGH {high:g}; write "
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

    ``vertices`` are its extreme points — ``None`` for a box with more than
    :data:`~sensiv.sensitivity.convex_max.CORNER_LIMIT` ranges, whose ``2^k`` corners are never
    stored (:mod:`sensiv.sensitivity.union_sets` works from the ranges); ``constraints``/``rhs``
    describe it as ``constraints @ γ ≤ rhs``; ``box`` is set when Γ is a product of ranges.
    """

    instruments: tuple[str, ...]
    vertices: np.ndarray | None
    constraints: np.ndarray
    rhs: np.ndarray
    box: tuple[Interval, ...] | None = None

    @property
    def bounding_box(self) -> tuple[Interval, ...]:
        if self.box is not None:
            return self.box
        return tuple(Interval(float(lo), float(hi))
                     for lo, hi in zip(self.vertices.min(axis=0), self.vertices.max(axis=0)))

    @property
    def is_zero(self) -> bool:
        return all(b.low == 0.0 and b.high == 0.0 for b in self.bounding_box)


def check_range_count(count: int, instruments: Sequence[str]) -> None:
    """One ``--direct`` range per instrument, or an InputError saying so."""
    if count != len(instruments):
        raise InputError(f"{count} --direct range(s) for {len(instruments)} instrument(s) "
                         f"({', '.join(instruments)}); give one per instrument, in instrument "
                         "order")


def box_set(instruments: Sequence[str], ranges: Sequence[tuple[float, float]]) -> DirectSet:
    """Γ = ``[low₁, high₁] × … × [low_k, high_k]`` in outcome units (corners stored only
    for at most :data:`~sensiv.sensitivity.convex_max.CORNER_LIMIT` ranges).

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
    k = len(instruments)
    corners = None
    if k <= CORNER_LIMIT:
        corners = np.array(list(itertools.product(*[(lo, hi) for lo, hi in zip(lows, highs)])))
        corners = np.unique(corners, axis=0)
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
    return polytope_set(instruments, *polytope_rows(path, instruments))


def polytope_rows(path, instruments: Sequence[str]) -> tuple[np.ndarray, np.ndarray]:
    """The rows ``(A, b)`` of a polytope CSV file (format of :func:`read_polytope`), checked
    for the columns and finite numbers but not for boundedness."""
    import pandas as pd

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
    return values[list(instruments)].to_numpy(float), values["bound"].to_numpy(float)


def scale_from_moments(moments: Moments, outcome: str, instruments: Sequence[str],
                       reduced_form: np.ndarray) -> Scale:
    """The units of :class:`Scale` (weighted SDs with divisor ``Σw``).

    Parameters
    ----------
    moments : sensiv.estimation.moments.Moments
        Pass-1 moments holding the outcome and every instrument.
    outcome : str
    instruments : sequence of str
    reduced_form : ndarray, shape (k_z,)
        Reduced-form coefficients of the instruments (controls partialled out).
    """
    return Scale(tuple(instruments), np.asarray(reduced_form, float),
                 math.sqrt(moments.variance(outcome)),
                 np.array([math.sqrt(moments.variance(z)) for z in instruments]))


def scale_of_pieces(pieces) -> Scale:
    """The :class:`Scale` of a fit's pieces (:class:`sensiv.estimation.iv.Pieces`): the
    reduced-form coefficients of the instruments (controls partialled out) and the SDs."""
    d = pieces.design
    zt = pieces.z_partialled
    reduced_form = linalg.sym_inv_psd(zt.T @ pieces.gram @ zt) @ (zt.T @ pieces.gram @ d.y)
    return scale_from_moments(pieces.moments, d.outcome, d.instruments, reduced_form)


def resolve_ranges(ranges: Sequence[RangeSpec], scale: Scale) -> DirectSet:
    """Convert ``--direct`` ranges to outcome units and build the box Γ."""
    check_range_count(len(ranges), scale.instruments)
    out = []
    for j, r in enumerate(ranges):
        a, b = scale.to_outcome(j, r.low, r.unit), scale.to_outcome(j, r.high, r.unit)
        out.append((min(a, b), max(a, b)))
    return box_set(scale.instruments, out)


def set_in_units(dset: DirectSet, scale: Scale, unit: str) -> tuple[Interval, ...]:
    """The bounding box of Γ per instrument, read in ``unit`` (``"rf"`` or ``"sd"``).

    Each end is converted by :meth:`Scale.in_units` and the pair re-sorted, since a negative
    reduced-form coefficient reverses the order.
    """
    out = []
    for k, box in enumerate(dset.bounding_box):
        a, b = scale.in_units(k, box.low, unit), scale.in_units(k, box.high, unit)
        out.append(Interval(min(a, b), max(a, b)))
    return tuple(out)
