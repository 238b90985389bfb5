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

The tables in :mod:`sensiv.estimation.tf_table` (95%), :mod:`~sensiv.estimation.tf_table_90`
and :mod:`~sensiv.estimation.tf_table_99` were written by :func:`tabulate` (``python -m
sensiv.estimation.tf``); :func:`critical_value` interpolates them linearly in ``√F``, as for
95%.  At 90% the recurrence reaches ``z`` at F ≈ 33.67.  At 99% it has not reached ``z`` where
its grid ends (F ≈ 8,142, c ≈ 2.5792, 0.13% above ``z``); that last value is used beyond (a
conservative end, since ``c`` decreases in F), and the table is made non-increasing there by
the largest value at or beyond each point, which irons out rounding wiggles of the flat tail.
Other levels get ``None`` with the reason: the recurrence takes tens of seconds to minutes per
level, far above the one second an on-demand computation may cost.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np

from sensiv.core.results import Interval, json_number
from sensiv.estimation import tf_table, tf_table_90, tf_table_99
from sensiv.estimation.tf_table import C_VALUES, Q_VALUES  # noqa: F401  (re-exported)

LEVEL = 0.95
Z = 1.959963984540054  # z_{0.975}
LOWER_F = Z * Z
"""At or below this first-stage F (3.84) the 95% tF interval is the whole line."""
UPPER_F = float(Q_VALUES[-1]) ** 2
"""From this F on (≈ 104.67) the 95% tF critical value is 1.96."""


@dataclass(frozen=True, slots=True)
class Table:
    """One level's tabulated ``c(q)`` at ``q = √F``, with ``z = z_{1−α/2}``."""

    level: float
    z: float
    q: np.ndarray
    c: np.ndarray

    @property
    def lower_f(self) -> float:
        """At or below this F (``z²``) the tF interval is the whole line."""
        return self.z * self.z

    @property
    def upper_f(self) -> float:
        """Where the table ends: from this F on the critical value is ``z`` — or, when the
        recurrence had not reached ``z`` there (:attr:`reaches_z` false), the table's last
        value, which is above the true one (``c`` decreases in F), so the test stays valid."""
        return float(self.q[-1]) ** 2

    @property
    def reaches_z(self) -> bool:
        """Whether the table ends at ``z`` (to its 8 printed digits)."""
        return bool(self.c[-1] <= self.z * (1.0 + 1e-7))

    @property
    def last(self) -> float:
        """The critical value from :attr:`upper_f` on."""
        return self.z if self.reaches_z else float(self.c[-1])


TABLES = {module.LEVEL: Table(module.LEVEL, module.Z, np.asarray(module.Q_VALUES),
                              np.asarray(module.C_VALUES))
          for module in (tf_table_90, tf_table, tf_table_99)}
"""The shipped levels (0.90, 0.95, 0.99)."""


def table_for(confidence_level: float) -> Table | None:
    """The shipped table of ``confidence_level`` (to 1e-12), else ``None``."""
    for level, table in TABLES.items():
        if abs(confidence_level - level) <= 1e-12:
            return table
    return None


def critical_value(f_stat: float, confidence_level: float = LEVEL) -> float:
    """The tF critical value for a first-stage F at a shipped level (``inf`` at or below
    ``z²``; :attr:`Table.last` from the end of the table on)."""
    table = table_for(confidence_level)
    if table is None:
        raise ValueError(f"no tF table at level {confidence_level}")
    if not f_stat > table.lower_f:
        return math.inf
    q = math.sqrt(f_stat)
    if q >= table.q[-1]:
        return table.last
    return float(max(np.interp(q, table.q, table.c), table.z))


@dataclass(frozen=True, slots=True)
class TF:
    """The tF critical value and interval of one coefficient (``None`` with a reason)."""

    f: float
    critical_value: float | None
    ci: Interval | None
    reason: str | None = None
    level: float = LEVEL

    @property
    def table(self) -> Table | None:
        return table_for(self.level)

    def to_dict(self) -> dict:
        pct = f"{100 * self.level:g}%"
        source = f"Lee, McCrary, Moreira & Porter (2022), {pct} level"
        if abs(self.level - LEVEL) > 1e-12 and self.table is not None:
            source += (" (table computed by sensiv.estimation.tf.tabulate from the LMMP "
                       "characterisation)")
        return {"critical_value": json_number(self.critical_value),
                "ci": None if self.ci is None else self.ci.to_list(), "f": json_number(self.f),
                "reason": self.reason, "source": source}


def tf_interval(estimate: float, se: float, f_stat: float, confidence_level: float) -> TF:
    """The tF interval ``estimate ± c(F)·se`` (the whole line at or below F = ``z²``)."""
    table = table_for(confidence_level)
    if table is None:
        return TF(f_stat, None, None, "tF critical values are tabulated for the 90%, 95% and "
                                      "99% levels only (computing another level's table takes "
                                      "minutes); use --level 0.90, 0.95 or 0.99",
                  confidence_level)
    c = critical_value(f_stat, table.level)
    if math.isinf(c):
        return TF(f_stat, None, Interval(-math.inf, math.inf),
                  f"first-stage F = {f_stat:.3g} is at or below {table.lower_f:.3g}: the "
                  f"{100 * table.level:g}% tF interval is the whole line (Lee, McCrary, "
                  "Moreira & Porter 2022)", table.level)
    return TF(f_stat, c, Interval(estimate - c * se, estimate + c * se), None, table.level)


def tabulate(alpha: float = 0.05, points: int = 2600) -> tuple[np.ndarray, np.ndarray]:
    """The recurrence of the module docstring: ``(q, c(q))`` from just above ``z`` until ``c``
    reaches ``z`` — or, if it has not by ``q = z + 87.66`` (the 99% level), to there (minutes of
    CPU; used to write the table modules)."""
    from scipy import optimize, stats

    norm = stats.norm
    z = float(norm.ppf(1 - alpha / 2))
    first = z + np.concatenate([np.geomspace(1e-6, 0.5, points // 9),
                                np.linspace(0.5, 12.0, points - points // 9)[1:]])
    step = 4.0 * (first[-1] - first[-2])
    # beyond z + 12 (needed at the 99% level) steps four times as long, where c is flat
    grid = itertools.chain(first, (first[-1] + step * j for j in range(1, 3802)))
    done_q: list[float] = []
    done_c: list[float] = []

    def c_at(x):
        out = np.interp(x, done_q, done_c) if done_q else np.full_like(x, np.inf)
        return np.where(x <= z, np.inf, out)

    def side_terms(f0: float, q: float) -> float:
        total = 0.0
        top = min(f0, q)
        if top > z:  # rejections below f0 (f (f0 − f) > c f0), within 10 SDs of f0
            f = np.linspace(max(z, f0 - 10.0), top, 2000)
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

        low, high = math.log(0.5), math.log(1e8)
        if done_c and gap(math.log(done_c[-1]) + 0.01) < 0 < gap(math.log(done_c[-1]) - 0.1):
            low, high = math.log(done_c[-1]) - 0.1, math.log(done_c[-1]) + 0.01
        c = math.exp(optimize.brentq(gap, low, high, xtol=1e-12))
        done_q.append(float(q))
        done_c.append(c)
        if c < z:
            break
    else:  # c still above z where the grid ends (99%): the table stops there, made
        # non-increasing by the largest value at or beyond each q (conservative; it irons out
        # the recurrence's rounding wiggles of about 1e-4 where c is flat)
        c_arr = np.maximum.accumulate(np.array(done_c)[::-1])[::-1]
        return np.array(done_q), c_arr
    q_arr, c_arr = np.array(done_q), np.array(done_c)
    # the last step crossed z: end the table exactly where c = z (linear in q)
    q_end = q_arr[-2] + (q_arr[-1] - q_arr[-2]) * (c_arr[-2] - z) / (c_arr[-2] - c_arr[-1])
    return np.append(q_arr[:-1], q_end), np.append(c_arr[:-1], z)


MODULES = {0.95: "tf_table", 0.90: "tf_table_90", 0.99: "tf_table_99"}
"""The module of each shipped level."""


def write_table(path, alpha: float = 0.05) -> None:
    """Write the table module of level ``1 − alpha`` (e.g. :mod:`sensiv.estimation.tf_table`)
    from :func:`tabulate`."""
    q, c = tabulate(alpha)
    with open(path, "w", encoding="utf-8") as handle:
        handle.write(table_text(q, c, round(1.0 - alpha, 12)))


def table_text(q: np.ndarray, c: np.ndarray, level: float) -> str:
    """The source of a table module from :func:`tabulate`'s ``(q, c)``: every 4th point up to
    ``q = z + 12``, every 8th beyond (the flat 99% tail), and the last."""
    from scipy import stats

    z = float(stats.norm.ppf(0.5 + 0.5 * level))
    near = np.flatnonzero(q <= z + 12.0 + 1e-9)
    far = np.flatnonzero(q > z + 12.0 + 1e-9)
    keep = np.unique(np.concatenate([near[::4], far[::8], [len(q) - 1]]))
    q, c = q[keep], c[keep]

    def rows(values) -> str:
        cells = [f"{v:.8g}," for v in values]
        return "\n".join("    " + " ".join(cells[i:i + 7]) for i in range(0, len(cells), 7))

    return (f'"""{100 * level:g}% tF critical values c(q) at q = √F, written by '
            '``sensiv.estimation.tf.write_table``\n(the recurrence of :mod:`sensiv.estimation.'
            'tf`; every 4th point of its grid, so linear\ninterpolation of this convex '
            'function errs upwards, on the safe side; regenerate with\n``python -m '
            'sensiv.estimation.tf``).  Computed by sensiv.estimation.tf.tabulate from the '
            'LMMP\ncharacterisation.  Do not edit."""\n\n'
            f"LEVEL = {level!r}\nZ = {float(z)!r}\n\n"
            f"Q_VALUES = (\n{rows(q)}\n)\n\nC_VALUES = (\n{rows(c)}\n)\n")


if __name__ == "__main__":  # pragma: no cover - the generator of the shipped tables
    import pathlib

    for lvl, name in MODULES.items():
        write_table(pathlib.Path(__file__).with_name(f"{name}.py"), round(1.0 - lvl, 12))
