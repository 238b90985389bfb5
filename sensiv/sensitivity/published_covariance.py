r"""The covariance of reduced form and first stage behind a published estimate, and its cores.

A reader often has only what a paper prints: the IV estimate ``B`` with its standard error
``S``, the first-stage coefficient ``P = π̂`` with its standard error ``SP`` (or the first-stage
``F``, then ``SP = |P|/√F``), sometimes the reduced-form coefficient ``R = ρ̂`` with its standard
error ``SR``.  In the just-identified model the estimate under a direct effect ``γ`` of the
instrument on the outcome is

.. math::

    \hat β(γ) = \frac{\hat ρ - γ}{\hat π} = B - \frac{γ}{P},
    \qquad \hat ρ = B P,

and, with ``V = Cov(ρ̂, π̂) = [[v_ρρ, c], [c, v_ππ]]``, its delta-method variance is a quadratic
in ``γ``:

.. math::

    P^2 \operatorname{Var}\hat β(γ) = v_{ρρ} - 2\,\hat β(γ)\,c + \hat β(γ)^2 v_{ππ}
    = Q_{00} - 2γ Q_{01} + γ^2 Q_{11} \quad(\text{times } P^2),

    Q_{00} = \frac{v_{ρρ} - 2Bc + B^2 v_{ππ}}{P^2}, \quad
    Q_{01} = \frac{B v_{ππ} - c}{P^3}, \quad
    Q_{11} = \frac{v_{ππ}}{P^4},

which is exactly the :class:`~sensiv.sensitivity.linear_core.Core` form ``[1, −γ] Q [1, −γ]'``
with estimate ``B`` and slope ``1/P`` (``det Q = (v_ρρ v_ππ − c²)/P⁶ ≥ 0``).  In a
just-identified 2SLS fit this is not an approximation of the data-based variance: the 2SLS
residual at ``γ`` is the reduced-form residual minus ``β̂(γ)`` times the first-stage residual,
so the classic, robust and cluster sandwiches of ``β̂(γ)`` equal the delta-method variance
built from the same kind of covariance of ``(ρ̂, π̂)``.  The only unknown is ``c``, which
papers seldom print:

* **backed out** when ``SR`` is printed: the delta method at ``γ = 0`` gives
  ``S²P² = SR² − 2Bc + B²SP²``, so ``c = (SR² + B²SP² − S²P²)/(2B)``.  If the implied
  correlation ``c/(SR·SP)`` falls outside ``[−1, 1]`` (rounding in the printed table) it is
  clipped, and if the clipped variance at ``γ = 0`` falls below ``S²`` the difference is added
  to ``Q₀₀`` so that no interval is narrower than the printed one;
* **worst case** otherwise (no ``SR``, or ``B = 0`` where ``c`` cannot be recovered): every
  ``c`` with ``|c − B·SP²| ≤ SP·S·|P|`` is consistent with the printed ``S`` (these are exactly
  the correlations in ``[−1, 1]``), and maximising over them gives

  .. math::

      \operatorname{se}_{\max}(γ) = S + |γ|\,\frac{SP}{P^2},

  the two ends being the perfectly correlated covariances.  Each end is a ``Core``; the
  worst-case interval at ``γ`` is the hull of the two, so the union over Γ is the hull of the
  two exact unions, the breakdown scale the smaller of the two, and the weak-IV-robust set the
  union of the two exact Anderson–Rubin sets (the AR variance ``v_ρρ − 2β₀c + β₀²v_ππ`` is also
  linear in ``c``, so its maximum over the admissible ``c`` sits at the same two ends).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sensiv.core.results import json_number
from sensiv.sensitivity.frontier import Frontier, breakdown_frontier
from sensiv.sensitivity.linear_core import Core
from sensiv.sensitivity.published_inputs import Reported
from sensiv.sensitivity.union import (breakdown_scale, direct_breakdown, identified_curve,
                                      union_curve)

FOCUS = "treatment"          # published numbers carry no column names
INSTRUMENT = "instrument"
OUTCOME = "outcome"
ROLES = (OUTCOME, FOCUS, INSTRUMENT)   # what --label / [study.labels] name for printed numbers
# Below this |B|·SP relative to S·|P| the back-out c = (…)/(2B) has lost every digit.
BACKOUT_TOL = 1e-12

METHOD_BACKED_OUT = "backed-out"
METHOD_CLIPPED = "backed-out, clipped"
METHOD_WORST = "worst-case"


@dataclass(frozen=True, slots=True)
class Covariance:
    """The covariance(s) of (reduced form, first stage) used, and how they were chosen.

    ``matrices`` holds one 2×2 matrix (backed out) or the two extreme ones (worst case);
    ``inflation`` is added to ``Q₀₀`` after clipping so no interval is narrower than printed.
    ``centred`` holds, per matrix, ``(Var(ρ̂ − Bπ̂), Cov(ρ̂ − Bπ̂, π̂))`` as constructed, from
    which the cores are built: formed from the matrix instead, they cancel to nothing when
    ``|B|·SP`` dwarfs ``S·|P|`` (the printed ``S²P²`` is then below the rounding of ``v_ρρ``).
    """

    method: str
    matrices: tuple[np.ndarray, ...]
    correlation: float | None          # used (after clipping); None in the worst case
    implied_correlation: float | None  # before clipping
    inflation: float
    words: str
    centred: tuple[tuple[float, float], ...]

    def to_dict(self) -> dict:
        single = self.matrices[0] if len(self.matrices) == 1 else None
        return {"method": self.method,
                "rf_fs_covariance": None if single is None else float(single[0, 1]),
                "rf_fs_correlation": json_number(self.correlation),
                "implied_correlation": json_number(self.implied_correlation),
                "variance_added": self.inflation}


def _matrix(v_rr: float, v_rp: float, v_pp: float) -> np.ndarray:
    return np.array([[v_rr, v_rp], [v_rp, v_pp]])


def worst_case_matrices(b: float, s: float, p: float, sp: float) -> tuple[np.ndarray, np.ndarray]:
    r"""The two perfectly correlated covariances of ``(ρ̂, π̂)`` that bound every admissible one.

    With ``S`` printed, ``c = B·SP² + d`` and ``v_ρρ = S²P² + 2Bc − B²SP²``; ``|d| ≤ SP·S·|P|``
    is equivalent to ``|corr| ≤ 1``.  The ends ``d = ±SP·S·|P|`` give
    ``v_ρρ = (S|P| ± B·SP)²`` and correlation ±1.

    Examples
    --------
    >>> a, b = worst_case_matrices(0.5, 0.1, 2.0, 0.2)
    >>> a.round(6).tolist(), b.round(6).tolist()
    ([[0.09, 0.06], [0.06, 0.04]], [[0.01, -0.02], [-0.02, 0.04]])
    """
    out = []
    for sign in (1.0, -1.0):
        d = sign * sp * s * abs(p)
        out.append(_matrix((s * abs(p) + sign * b * sp) ** 2, b * sp * sp + d, sp * sp))
    return out[0], out[1]


def _worst_centred(s: float, p: float, sp: float) -> tuple[tuple[float, float], ...]:
    """``(Var(ρ̂ − Bπ̂), Cov(ρ̂ − Bπ̂, π̂))`` of :func:`worst_case_matrices`' two ends."""
    return tuple(((s * p) ** 2, sign * sp * s * abs(p)) for sign in (1.0, -1.0))


def choose_covariance(rep: Reported, sp: float) -> tuple[Covariance, list[str]]:
    """Back the covariance out of the printed IV se, or take the worst case; say which."""
    b, s, p = rep.estimate, rep.se, rep.first_stage
    notes: list[str] = []
    sr = rep.reduced_form_se
    if sr is not None and abs(b) * sp > BACKOUT_TOL * s * abs(p):
        c = (sr * sr + b * b * sp * sp - s * s * p * p) / (2.0 * b)
        implied = c / (sr * sp)
        if -1.0 <= implied <= 1.0:
            words = ("covariance of reduced form and first stage backed out from the reported "
                     f"IV se by the delta method (implied correlation {implied:.4g}); the "
                     "delta-method variance of (rho - gamma)/pi is used at every direct effect")
            return Covariance(METHOD_BACKED_OUT, (_matrix(sr * sr, c, sp * sp),), implied,
                              implied, 0.0, words, (((s * p) ** 2, c - b * sp * sp),)), notes
        clipped = max(-1.0, min(1.0, implied))
        c = clipped * sr * sp
        centred = (sr * sr - 2.0 * b * c + b * b * sp * sp, c - b * sp * sp)
        inflation = max(0.0, s * s - centred[0] / (p * p))
        words = ("covariance of reduced form and first stage backed out from the reported IV "
                 f"se by the delta method; the implied correlation {implied:.4g} lies outside "
                 f"[-1, 1] (rounding in the printed table) and was clipped to {clipped:g}"
                 + ("; the variance at zero direct effect is kept at the reported se^2"
                    if inflation > 0 else "")
                 + "; the delta-method variance of (rho - gamma)/pi is used at every direct "
                 "effect")
        notes.append(
            f"the printed standard errors are not mutually consistent: the IV se {s:g}, "
            f"reduced-form se {sr:g} and first-stage se {sp:g} imply a correlation of "
            f"{implied:.4g} between reduced form and first stage; it was clipped to "
            f"{clipped:g} (check the table for a typo if rounding cannot explain this)")
        return Covariance(METHOD_CLIPPED, (_matrix(sr * sr, c, sp * sp),), clipped, implied,
                          inflation, words, (centred,)), notes
    reason = ("no reduced-form se is printed" if sr is None else
              "the estimate is zero, so the reported IV se carries no information on it")
    words = (f"covariance of reduced form and first stage unknown ({reason}): worst case over "
             "all correlations admissible with the reported IV se, i.e. se(gamma) = se + "
             "|gamma| * first-stage se / first-stage^2 (reduced form and first stage perfectly "
             "correlated in the least favourable direction); the weak-instrument-robust set "
             "is the union over the two extreme correlations")
    if sr is not None:
        notes.append("the reduced-form se was not used: " + reason)
    return Covariance(METHOD_WORST, worst_case_matrices(b, s, p, sp), None, None, 0.0,
                      words, _worst_centred(s, p, sp)), notes


def core_from(estimate: float, first_stage: float, matrix: np.ndarray, critical: float,
              inflation: float = 0.0, centred: tuple[float, float] | None = None) -> Core:
    """The :class:`~sensiv.sensitivity.linear_core.Core` of ``(ρ̂ − γ)/π̂`` for one covariance
    of ``(ρ̂, π̂)`` (``centred``: its ``Var(ρ̂ − Bπ̂)`` and ``Cov(ρ̂ − Bπ̂, π̂)`` as constructed,
    see :class:`Covariance`; else formed from ``matrix``).

    Examples
    --------
    >>> core = core_from(0.5, 2.0, np.array([[0.01, 0.0], [0.0, 0.04]]), 1.96)
    >>> core.quad.round(6).tolist()
    [[0.005, 0.0025], [0.0025, 0.0025]]
    """
    b, p = estimate, first_stage
    v_rr, v_rp, v_pp = float(matrix[0, 0]), float(matrix[0, 1]), float(matrix[1, 1])
    w_rr, w_rp = centred if centred is not None else (v_rr - 2.0 * b * v_rp + b * b * v_pp,
                                                      v_rp - b * v_pp)
    q00 = w_rr / (p * p) + inflation
    q01 = -w_rp / p**3
    q11 = v_pp / p**4
    quad = np.array([[q00, q01], [q01, q11]])
    return Core(FOCUS, (INSTRUMENT,), b, np.array([1.0 / p]), quad, critical)


# ==================================================================== the worst case over cores
def hull_curve(cores: list[Core], vertices: np.ndarray, scales: np.ndarray
               ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Union-interval ends and identified-set ends over ``scales``.

    Worst case: the interval at each γ is the hull of the cores' intervals (see module doc);
    the identified set depends on the estimate and the slope only, which the cores share.
    """
    ends = [union_curve(core, vertices, scales) for core in cores]
    lo = np.min([e[0] for e in ends], axis=0)
    hi = np.max([e[1] for e in ends], axis=0)
    id_lo, id_hi = identified_curve(cores[0], vertices, scales)
    return lo, hi, id_lo, id_hi


def hull_breakdown(cores: list[Core], vertices: np.ndarray, threshold: float,
                   uninformative: bool) -> tuple[float | None, float | None, float | None]:
    """``(scale, direct_lower, direct_upper)`` of the breakdown at ``threshold``: the least
    favourable of the cores (the smaller scale, the breakdown direct effects nearest zero);
    the scale is 0 with an ``uninformative`` first stage."""
    lowers, uppers = zip(*(direct_breakdown(core, threshold) for core in cores))
    below = [v[0] for v in lowers if v[0] is not None]
    above = [v[0] for v in uppers if v[0] is not None]
    direct_lower = max(below) if below else None
    direct_upper = min(above) if above else None
    if uninformative:
        return 0.0, direct_lower, direct_upper
    found = [t for t in (breakdown_scale(core, vertices, threshold) for core in cores)
             if t is not None]
    return (min(found) if found else None), direct_lower, direct_upper


def hull_frontier(cores: list[Core], vertices: np.ndarray, thresholds: np.ndarray,
                  uninformative: bool) -> Frontier:
    """The breakdown frontier; in the worst case the least favourable of the two cores at
    every threshold (the smaller scale, the breakdown direct effects nearest zero), as for the
    single threshold of the analysis.  The cores share the interval at zero direct effect
    (``Q₀₀ = S²`` for both), hence the side of each threshold."""
    parts = [breakdown_frontier(core, vertices, thresholds, uninformative=uninformative)
             for core in cores]
    if len(parts) == 1:
        return parts[0]
    return Frontier(parts[0].threshold, np.min([f.scale for f in parts], axis=0),
                    parts[0].side, np.max([f.direct_lower for f in parts], axis=0),
                    np.min([f.direct_upper for f in parts], axis=0))
