r"""The largest value of ``f(γ) = s'γ + c·√q(γ)`` over a box, without enumerating ``2^k`` corners.

``q(γ) = [1, −γ'] Q [1, −γ']'`` with ``Q`` positive semi-definite (the variance quadratic of
:mod:`sensiv.sensitivity.linear_core`), so ``√q`` is the norm of an affine map of ``γ`` and
``f`` is convex: its maximum over a box sits at a corner, which is why the union of intervals
used to enumerate them.  Here the maximum is found exactly while few coordinates matter and
certified beyond:

1. **Monotone coordinates.**  ``√q`` changes by at most ``√Q_jj`` per unit of ``γ_j``
   (Cauchy–Schwarz for the semi-definite ``Q``: ``|e_j'Qv| ≤ √Q_jj·√(v'Qv)``), so when
   ``|s_j| ≥ c√Q_jj`` the function is monotone in ``γ_j`` on the whole box and ``γ_j`` sits at
   the end that ``sign(s_j)`` picks.  In large samples this fixes almost every coordinate.
2. **Corners** of the remaining free coordinates are enumerated (in chunks of
   :data:`CHUNK_ROWS` rows, so memory does not grow with ``2^k``) while there are at most
   :data:`CORNER_LIMIT` of them: the answer is exact.
3. **Branch and bound** beyond: a sub-box's upper bound is the smaller of (a) interval
   arithmetic, ``s'm + |s|'h + c·√(q(m) + |∇q(m)|'h + h'|Q|h)`` around the centre ``m`` with
   half-widths ``h``, and (b) a tangent plane of the concave over-estimator
   ``φ(γ) = s'γ + c·√(q(γ) + Σ_j λ_j (γ_j − l_j)(u_j − γ_j))`` with ``λ_j = Σ_i |Q_ji| w_i / w_j``
   (``w`` the widths; then ``diag(λ) − Q`` is diagonally dominant after scaling by ``w``, so
   ``φ`` is concave and ``φ ≥ f`` on the sub-box, equal at its corners) — a tangent plane of a
   concave function lies above it, and its maximum over a box is closed form.  Lower bounds
   are corner values.  Sub-boxes are explored best bound first, split at the middle of the
   coordinate with the largest over-estimate, and a sub-box with at most
   :data:`LEAF_CORNERS` free coordinates is enumerated.  The search stops when the best upper
   bound exceeds the best corner value by at most ``gap`` (default :data:`GAP`) times the
   distance of that value from ``s'm`` (the ``s``-part at the box centre), or after
   ``max_nodes`` sub-boxes; the reported ``value`` is the best upper bound, never below the
   maximum (up to rounding), and ``exact`` says whether the gap was closed.
"""

from __future__ import annotations

import heapq
import math
from dataclasses import dataclass

import numpy as np

CORNER_LIMIT = 12           # free coordinates whose corners are enumerated outright
LEAF_CORNERS = 8            # a sub-box with this many free coordinates is enumerated
GAP = 1e-9                  # default relative gap at which branch and bound stops
MAX_NODES = 2_000           # sub-boxes explored before an outer bound is reported
CHUNK_ROWS = 4096           # corners evaluated at a time
_LOCAL_ITER = 30            # iterations of the bounded ascent on the over-estimator


@dataclass(frozen=True, slots=True)
class Maximum:
    """``value`` ≥ the maximum ≥ ``attained`` = ``f(point)`` at a corner ``point``.

    ``method`` is ``"corners"`` (enumerated, exact) or ``"branch_and_bound"``; ``gap`` the
    achieved relative gap ``(value − attained) / (attained − s'm)``; ``exact`` whether it is at
    most the requested gap.
    """

    value: float
    attained: float
    point: np.ndarray
    method: str
    gap: float
    exact: bool


@dataclass(frozen=True, slots=True)
class Objective:
    """``f(γ) = s'γ + c·√q(γ)``, ``q(γ) = q00 − 2 q01'γ + γ'q11 γ``."""

    s: np.ndarray
    c: float
    q00: float
    q01: np.ndarray
    q11: np.ndarray

    @classmethod
    def of(cls, s: np.ndarray, c: float, quad: np.ndarray) -> "Objective":
        quad = np.asarray(quad, float)
        return cls(np.asarray(s, float), float(c), float(quad[0, 0]), quad[0, 1:].copy(),
                   quad[1:, 1:].copy())

    def q(self, g: np.ndarray) -> np.ndarray:
        g = np.atleast_2d(g)
        return np.maximum(self.q00 - 2.0 * g @ self.q01
                          + np.einsum("ij,jk,ik->i", g, self.q11, g), 0.0)

    def values(self, g: np.ndarray) -> np.ndarray:
        g = np.atleast_2d(g)
        return g @ self.s + self.c * np.sqrt(self.q(g))


def fixed_coordinates(obj: Objective, lows: np.ndarray, highs: np.ndarray
                      ) -> tuple[np.ndarray, np.ndarray]:
    """``(base, free)``: ``base`` holds every monotone coordinate at its maximising end (the
    others at their low end); ``free`` marks the coordinates that still matter."""
    diag = np.sqrt(np.clip(np.diag(obj.q11), 0.0, None))
    free = (highs > lows) & (np.abs(obj.s) < obj.c * diag)
    base = np.where(obj.s > 0, highs, lows).astype(float)
    return base, free


def corners(base: np.ndarray, free: np.ndarray, lows: np.ndarray, highs: np.ndarray,
            start: int = 0, stop: int | None = None) -> np.ndarray:
    """Corners ``start .. stop`` (binary counting over the ``free`` coordinates) as rows."""
    index = np.flatnonzero(free)
    stop = 2 ** index.size if stop is None else stop
    codes = np.arange(start, stop, dtype=np.int64)
    bits = (codes[:, None] >> np.arange(index.size, dtype=np.int64)) & 1
    rows = np.repeat(base[None, :], codes.size, axis=0)
    rows[:, index] = np.where(bits == 1, highs[index], lows[index])
    return rows


def _enumerate(obj: Objective, base, free, lows, highs) -> tuple[float, np.ndarray]:
    best, point = -math.inf, base
    total = 2 ** int(free.sum())
    for start in range(0, total, CHUNK_ROWS):
        rows = corners(base, free, lows, highs, start, min(total, start + CHUNK_ROWS))
        values = obj.values(rows)
        i = int(np.argmax(values))
        if values[i] > best:
            best, point = float(values[i]), rows[i]
    return best, point


def maximise(obj: Objective, lows: np.ndarray, highs: np.ndarray, *, gap: float = GAP,
             corner_limit: int = CORNER_LIMIT, max_nodes: int = MAX_NODES) -> Maximum:
    """The maximum of ``obj`` over the box ``[lows, highs]`` (see the module text).

    ``corner_limit = -1`` forces branch and bound (used by the tests below the limit).
    """
    lows, highs = np.asarray(lows, float), np.asarray(highs, float)
    centre = float(obj.s @ (0.5 * (lows + highs)))
    base, free = fixed_coordinates(obj, lows, highs)
    l, u = node_fix(obj, np.where(free, lows, base), np.where(free, highs, base))
    free = u > l
    if int(free.sum()) <= corner_limit:
        best, point = _enumerate(obj, l, free, l, u)
        return Maximum(best, best, point, "corners", 0.0, True)
    return _branch_and_bound(obj, l, u, gap, max_nodes, centre)


def node_fix(obj: Objective, l: np.ndarray, u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Fix the coordinates in which ``f`` is monotone on the sub-box ``[l, u]``.

    ``∂f/∂γ_j = s_j + c·(Q₁₁γ − Q₀₁)_j / √q(γ)``: the numerator is affine (its range on the box
    is exact), ``√q`` lies between the tangent-plane lower bound and the interval upper bound,
    and the ratio is at most ``√Q_jj`` in size (Cauchy–Schwarz); when the range of the
    derivative excludes zero, ``γ_j`` sits at the end its sign picks.  Repeated while it fixes.
    """
    l, u = l.copy(), u.copy()
    cap = np.sqrt(np.clip(np.diag(obj.q11), 0.0, None))
    absq = np.abs(obj.q11)
    while True:
        m, h = 0.5 * (l + u), 0.5 * (u - l)
        slope = obj.q11 @ m - obj.q01                        # ½∇q at m
        q_m = float(obj.q(m)[0])
        spread = float(np.abs(slope) @ h)
        p_low = math.sqrt(max(q_m - 2.0 * spread, 0.0))
        p_high = math.sqrt(max(q_m + 2.0 * spread + float(h @ absq @ h), 0.0))
        reach = absq @ h
        low_num, high_num = slope - reach, slope + reach
        if p_low > 0.0:
            ratios = np.stack([low_num / p_low, low_num / p_high, high_num / p_low,
                               high_num / p_high])
            r_low = np.maximum(ratios.min(axis=0), -cap)
            r_high = np.minimum(ratios.max(axis=0), cap)
        else:
            r_low, r_high = -cap, cap
        up = (h > 0) & (obj.s + obj.c * r_low >= 0)
        down = (h > 0) & ~up & (obj.s + obj.c * r_high <= 0)
        if not (up.any() or down.any()):
            return l, u
        l[up] = u[up]
        u[down] = l[down]


def _bound(obj: Objective, l: np.ndarray, u: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]:
    """``(upper bound, corner candidate, over-estimate per coordinate)`` on ``[l, u]``."""
    m, h, w = 0.5 * (l + u), 0.5 * (u - l), u - l
    free = w > 0
    grad_q = 2.0 * (obj.q11 @ m - obj.q01)
    q_max = float(obj.q(m)[0]) + float(np.abs(grad_q) @ h) + float(h @ np.abs(obj.q11) @ h)
    interval_bound = float(obj.s @ m + np.abs(obj.s) @ h) + obj.c * math.sqrt(max(q_max, 0.0))
    lam = np.zeros_like(w)
    lam[free] = (np.abs(obj.q11)[np.ix_(free, free)] @ w[free]) / w[free]

    def phi(g: np.ndarray) -> tuple[float, np.ndarray]:
        qbar = float(obj.q(g)[0]) + float(lam @ ((g - l) * (u - g)))
        root = math.sqrt(max(qbar, 1e-300))
        grad = obj.s + obj.c * (2.0 * (obj.q11 @ g - obj.q01) + lam * (l + u - 2.0 * g)) / (
            2.0 * root)
        return float(obj.s @ g) + obj.c * root, grad

    g0 = _ascend(phi, np.where(obj.s >= 0, u, l), l, u)
    value, grad = phi(g0)
    tangent = value + float(np.sum(np.maximum(grad * (u - g0), grad * (l - g0))))
    candidate = np.where(g0 >= m, u, l)
    return min(interval_bound, tangent), candidate, lam * w * w


def _ascend(phi, g: np.ndarray, l: np.ndarray, u: np.ndarray) -> np.ndarray:
    """A few projected-gradient steps uphill on the concave ``phi`` over ``[l, u]`` (Armijo
    backtracking).  Any end point gives a valid tangent bound; a better one a tighter bound."""
    value, grad = phi(g)
    step = 1.0 / max(float(np.max(np.abs(grad))), 1e-300) * float(np.max(u - l))
    for _ in range(_LOCAL_ITER):
        while step > 1e-12 * float(np.max(u - l)):
            trial = np.clip(g + step * grad, l, u)
            moved = trial - g
            new_value, new_grad = phi(trial)
            if new_value >= value + 1e-4 * float(grad @ moved) and np.any(moved != 0):
                break
            step *= 0.5
        else:
            break
        if new_value - value <= 1e-15 * max(abs(value), 1.0):
            g, value, grad = trial, new_value, new_grad
            break
        g, value, grad = trial, new_value, new_grad
        step *= 2.0
    return g


def _branch_and_bound(obj: Objective, lows, highs, gap: float, max_nodes: int,
                      centre: float) -> Maximum:
    best, point = -math.inf, lows

    def consider(rows: np.ndarray) -> None:
        nonlocal best, point
        values = obj.values(rows)
        i = int(np.argmax(values))
        if values[i] > best:
            best, point = float(values[i]), rows[i].copy()

    def expand(l, u) -> tuple | None:
        """Bound a sub-box (or enumerate it); a heap entry, or None when it is closed."""
        l, u = node_fix(obj, l, u)
        free = u > l
        if int(free.sum()) <= LEAF_CORNERS:
            value, corner = _enumerate(obj, l, free, l, u)
            consider(corner[None, :])
            return None
        upper, candidate, over = _bound(obj, l, u)
        consider(np.vstack([candidate, np.where(obj.s >= 0, u, l)]))
        return (-upper, l, u, over)

    heap: list = []
    counter = 0
    entry = expand(lows, highs)
    if entry is not None:
        heap.append((entry[0], counter, *entry[1:]))
    nodes = 1
    while heap:
        upper = -heap[0][0]
        scale = max(best - centre, 1e-300)
        if upper <= best:
            heap = []
            break
        if upper - best <= gap * scale or nodes >= max_nodes:
            break
        _, _, l, u, over = heapq.heappop(heap)
        widths = u - l
        j = int(np.argmax(np.where(widths > 0, over + 1e-300 * widths, -1.0)))
        middle = 0.5 * (l[j] + u[j])
        for side in (0, 1):
            cl, cu = l.copy(), u.copy()
            if side == 0:
                cu[j] = middle
            else:
                cl[j] = middle
            child = expand(cl, cu)
            nodes += 1
            if child is not None and -child[0] > best:
                counter += 1
                heapq.heappush(heap, (child[0], counter, *child[1:]))
    value = max(best, -heap[0][0]) if heap else best
    achieved = (value - best) / max(best - centre, 1e-300) if value > best else 0.0
    return Maximum(value, best, point, "branch_and_bound", achieved, achieved <= gap)
