r"""tF critical values for the 2SLS t-ratio with one treatment and one instrument (Lee, McCrary,
Moreira & Porter 2022, "Valid t-ratio inference for IV", American Economic Review 112(10)).

Characterisation used (weak-instrument asymptotics of Staiger & Stock 1997, as in LMMP's
section II; the equations are written here from that characterisation, not copied): under
``β = β₀`` the Anderson–Rubin t-ratio ``t_AR ~ N(0, 1)`` and the signed first-stage t-ratio
``f ~ N(f₀, 1)`` (``F = f²``) are jointly normal with correlation ``ρ``, and the 2SLS t-ratio
is ``t² = t_AR² / (1 − 2ρ t_AR/f + t_AR²/f²)``.  The worst case over ``ρ`` is ``|ρ| = 1``
(checked numerically in the tests), where ``t_AR = f − f₀`` and ``t = f (f − f₀)/f₀``.

The tF test rejects when ``|t| > c(F)``.  :func:`tabulate` builds the smallest such ``c``
whose rejection probability at ``ρ = 1`` equals ``α`` for every ``f₀`` in the weak region:
with ``q = |f|`` the rejection region of ``f₀`` is ``{f > q : f₀ < q²/(q + c(q))}`` plus the
parts below ``f₀`` and on the negative side, which involve ``c`` only at magnitudes below
``q``; so, from ``c = ∞`` at ``q = z_{1−α/2}`` (``F = 3.84``: below it every tF interval is
the whole line) upward, each ``c(q)`` solves one equation in one unknown (a recurrence on a
grid of ``q``, with the normal probabilities integrated by the trapezoidal rule).  The
recurrence reaches ``c = 1.96`` at ``F ≈ 104.67`` and ``c`` stays 1.96 above, which are the
two numbers of LMMP's abstract (3.43 at ``F = 10`` and 1.96 from ``F = 104.7``).

The table in :mod:`sensiv.estimation.tf_table` was written by :func:`tabulate` (``python -m
sensiv.estimation.tf``); :func:`critical_value` interpolates it linearly in ``√F``.  Only the
95% level is tabulated; other levels get ``None`` with the reason.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from sensiv.core.results import Interval, json_number
from sensiv.estimation.tf_table import C_VALUES, Q_VALUES

LEVEL = 0.95
Z = 1.959963984540054  # z_{0.975}
LOWER_F = Z * Z
"""At or below this first-stage F (3.84) the tF interval is the whole line."""
UPPER_F = float(Q_VALUES[-1]) ** 2
"""From this F on (≈ 104.67) the tF critical value is 1.96."""


def critical_value(f_stat: float) -> float:
    """The 95% tF critical value for a first-stage F (``inf`` at or below 3.84)."""
    if not f_stat > LOWER_F:
        return math.inf
    q = math.sqrt(f_stat)
    if q >= Q_VALUES[-1]:
        return Z
    return float(max(np.interp(q, Q_VALUES, C_VALUES), Z))


@dataclass(frozen=True, slots=True)
class TF:
    """The tF critical value and interval of one coefficient (``None`` with a reason)."""

    f: float
    critical_value: float | None
    ci: Interval | None
    reason: str | None = None

    def to_dict(self) -> dict:
        return {"critical_value": json_number(self.critical_value),
                "ci": None if self.ci is None else self.ci.to_list(), "f": json_number(self.f),
                "reason": self.reason,
                "source": "Lee, McCrary, Moreira & Porter (2022), 95% level"}


def tf_interval(estimate: float, se: float, f_stat: float, confidence_level: float) -> TF:
    """The tF interval ``estimate ± c(F)·se`` (the whole line at or below F = 3.84)."""
    if abs(confidence_level - LEVEL) > 1e-12:
        return TF(f_stat, None, None, "tF critical values are tabulated for the 95% level "
                                      "only; use --level 0.95")
    c = critical_value(f_stat)
    if math.isinf(c):
        return TF(f_stat, None, Interval(-math.inf, math.inf),
                  f"first-stage F = {f_stat:.3g} is at or below 3.84: the tF interval is the "
                  "whole line (Lee, McCrary, Moreira & Porter 2022)")
    return TF(f_stat, c, Interval(estimate - c * se, estimate + c * se))


def tabulate(alpha: float = 0.05, points: int = 2600) -> tuple[np.ndarray, np.ndarray]:
    """The recurrence of the module docstring: ``(q, c(q))`` from just above ``z`` until ``c``
    reaches ``z`` (minutes of CPU; used to write :mod:`sensiv.estimation.tf_table`)."""
    from scipy import optimize, stats

    norm = stats.norm
    z = float(norm.ppf(1 - alpha / 2))
    grid = z + np.concatenate([np.geomspace(1e-6, 0.5, points // 9),
                               np.linspace(0.5, 12.0, points - points // 9)[1:]])
    done_q: list[float] = []
    done_c: list[float] = []

    def c_at(x):
        out = np.interp(x, done_q, done_c) if done_q else np.full_like(x, np.inf)
        return np.where(x <= z, np.inf, out)

    def side_terms(f0: float, q: float) -> float:
        total = 0.0
        top = min(f0, q)
        if top > z:  # rejections below f0 (f (f0 − f) > c f0)
            f = np.linspace(z, top, 2000)
            c = c_at(f)
            total += np.trapezoid(((f > c) & (f * f < f0 * (f - c))) * norm.pdf(f - f0), f)
        g = np.linspace(z, q, 2000)  # negative side, |f| = g below q; beyond q all reject
        total += np.trapezoid((g * (g + f0) > c_at(g) * f0) * norm.pdf(-g - f0), g)
        return total + norm.cdf(-q - f0)

    for q in grid:
        def gap(log_c: float) -> float:
            c = math.exp(log_c)
            f0 = q * q / (q + c)
            return norm.sf(q - f0) + side_terms(f0, q) - alpha

        c = math.exp(optimize.brentq(gap, math.log(0.5), math.log(1e8), xtol=1e-12))
        done_q.append(float(q))
        done_c.append(c)
        if c < z:
            break
    q_arr, c_arr = np.array(done_q), np.array(done_c)
    # the last step crossed z: end the table exactly where c = z (linear in q)
    q_end = q_arr[-2] + (q_arr[-1] - q_arr[-2]) * (c_arr[-2] - z) / (c_arr[-2] - c_arr[-1])
    return np.append(q_arr[:-1], q_end), np.append(c_arr[:-1], z)


def write_table(path) -> None:
    """Write :mod:`sensiv.estimation.tf_table` from :func:`tabulate`."""
    q, c = tabulate()
    keep = np.unique(np.concatenate([np.arange(0, len(q), 4), [len(q) - 1]]))
    q, c = q[keep], c[keep]

    def rows(values) -> str:
        cells = [f"{v:.8g}," for v in values]
        return "\n".join("    " + " ".join(cells[i:i + 7]) for i in range(0, len(cells), 7))

    text = ('"""95% tF critical values c(q) at q = √F, written by '
            '``sensiv.estimation.tf.write_table``\n(the recurrence of :mod:`sensiv.estimation.'
            'tf`; every 4th point of its grid, so linear\ninterpolation of this convex '
            'function errs upwards, on the safe side; regenerate with\n``python -m '
            'sensiv.estimation.tf``).  Do not edit."""\n\n'
            f"Q_VALUES = (\n{rows(q)}\n)\n\nC_VALUES = (\n{rows(c)}\n)\n")
    with open(path, "w", encoding="utf-8") as handle:
        handle.write(text)


if __name__ == "__main__":  # pragma: no cover - the generator of the shipped table
    import pathlib

    write_table(pathlib.Path(__file__).with_name("tf_table.py"))
