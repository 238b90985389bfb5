r"""Response types of the discrete bounds as the columns of a linear programme.

Notation: ``Z`` has ``K`` levels (coded 0..K-1 in their sorted order), ``X`` has ``J`` and
``Y`` has ``L``; ``v`` are ``Y``'s numeric levels.  A unit's *X-type* ``a`` is its treatment
at every level of ``Z`` (``a(z)``); its *Y-type* is its outcome for every pair ``(x, z)``.
``Z`` is randomised: independent of both types.  The observed ``P(y, x | z)`` is the share of
units with ``a(z) = x`` whose outcome at ``(x, z)`` is ``y``.

*Violating* types are those whose outcome changes with ``z`` for some ``x``; the budget
``ε`` caps their share (``ε = 0`` is the exclusion restriction).  *Defiers* are X-types with
``a(z) > a(z')`` for some ``z < z'``; under monotonicity their share is capped by ``δ``.
The effect of treatment level ``c`` against the base level 0 is

.. math::

    \theta_c = \sum_z P(z)\, E[Y(c, z) - Y(0, z)].

Two encodings of the same programme are built from the same code:

``full``
    every pair (X-type, Y-type) is a variable: ``J^K · L^(J·K)`` of them (64 for binary Z, X
    and Y; about a million for 4-level Z and Y).  Used to check the reduction.
``reduced`` (the default)
    an exact reduction to a few hundred variables, in two steps.

    1. *Merge what nothing can tell apart.*  The data see a unit only through ``a`` and the
       outcomes on its own path, ``y_z = Y(a(z), z)``.  The counterfactual outcomes
       ``Y(x, z)``, ``x ≠ a(z)``, enter only the effect and the violation flag.  So every class
       (``a``, path) is replaced by its best member for the objective: for a violating class
       each counterfactual is free (the largest or smallest ``v`` at every ``z``); a class
       whose path is constant in ``z`` within each treatment level also has non-violating
       members, ``Y(x, z) = g(x)``, with ``g`` fixed on the treatments that ``a`` takes and
       free elsewhere.  A class that holds a non-violating member may still be used as a
       violating one: that costs budget for nothing, so the optimum is unchanged.
    2. *Decouple the violating path across z.*  For violating classes the data rows, the
       effect, the budget and the defier share all add over ``z`` given ``a`` (or depend on
       ``a`` alone).  Their mass ``r(a, path)`` therefore matters only through the marginals
       ``s(a, z, y)`` (mass of X-type ``a`` with ``y_z = y``), which must share one total
       ``m(a)``; conversely any such marginals are the margins of the product coupling
       ``r = m Π_z s(a, z, y_z) / m``.  So the ``L^K`` paths per X-type become ``K·L``
       variables with ``K`` balance equations.

    For binary X, 4-level Z and Y this is 232 non-violating classes + 256 marginals + 16
    totals instead of 1,048,576 types, and it is exact: both programmes have the same optimum
    (checked against ``full`` in the tests).

The upper and lower bounds use the best and the worst member of each class; the breakdown
programme uses both, since a class's mass can be split between them to reach any effect in
between.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from typing import Literal

import numpy as np

from sensiv.core.errors import InputError

Enumeration = Literal["reduced", "full"]
MAX_FULL_TYPES = 200_000
"""Largest number of (X-type, Y-type) pairs the ``full`` enumeration will build."""


# ------------------------------------------------------------------------------- columns
@dataclass(frozen=True, slots=True)
class Columns:
    """The variables of one copy of a programme, as matrices over those variables.

    ``observe`` (K·J·L × n, rows ordered ``(z·J + x)·L + y``) gives each variable's
    contribution to ``P(y, x | z)``; ``balance @ v == 0`` ties decoupled marginals to their
    totals (no rows for ``full``); ``violates`` and ``defies`` are the 0/1 rows whose products
    with ``v`` are the violating and the defier shares; the effect is
    ``fixed @ v + P(z) @ (weighted @ v)``.
    """

    observe: object  # scipy.sparse.csr_matrix
    balance: object  # scipy.sparse.csr_matrix
    violates: np.ndarray
    defies: np.ndarray
    fixed: np.ndarray
    weighted: object  # scipy.sparse.csr_matrix, K × n

    @property
    def size(self) -> int:
        return int(self.violates.shape[0])


@dataclass(frozen=True, slots=True)
class Design:
    """Columns for the upper bound (best member of each class) and the lower bound (worst)."""

    upper: Columns
    lower: Columns


def x_types(K: int, J: int) -> np.ndarray:
    """All X-types, shape ``(J**K, K)``: ``a[i, z]`` is type ``i``'s treatment at ``z``."""
    return np.array(list(itertools.product(range(J), repeat=K)), dtype=np.int64).reshape(-1, K)


def is_defier(types: np.ndarray) -> np.ndarray:
    """Whether each X-type lowers the treatment somewhere as ``z`` moves up its order."""
    return (np.diff(types, axis=1) < 0).any(axis=1)


def _row(z, x, y, J: int, L: int):
    return (z * J + x) * L + y


def _sparse(rows: np.ndarray, cols: np.ndarray, values: np.ndarray, shape: tuple[int, int]):
    import scipy.sparse as sp

    return sp.csr_matrix((values.astype(np.float64), (rows, cols)), shape=shape)


def full_design(K: int, J: int, L: int, values: np.ndarray, contrast: int) -> Design:
    """Every (X-type, Y-type) pair as a variable; the same columns serve both bounds.

    Raises
    ------
    InputError
        More than :data:`MAX_FULL_TYPES` pairs.
    """
    n_x, n_y = J ** K, L ** (J * K)
    if n_x * n_y > MAX_FULL_TYPES:
        raise InputError(
            f"the full enumeration of response types has {n_x * n_y:,} variables for "
            f"{K}-level Z, {J}-level X and {L}-level Y (limit {MAX_FULL_TYPES:,}); use "
            "enumeration='reduced', which gives the same bounds"
        )
    xt = x_types(K, J)
    yt = np.array(list(itertools.product(range(L), repeat=J * K)),
                  dtype=np.int64).reshape(n_y, J, K)
    a = np.repeat(np.arange(n_x), n_y)
    b = np.tile(np.arange(n_y), n_x)
    n = n_x * n_y
    zs = np.arange(K)
    taken = xt[a]                                   # (n, K) treatment at each z
    seen = yt[b[:, None], taken, zs[None, :]]       # (n, K) observed outcome at each z
    observe = _sparse(_row(zs[None, :], taken, seen, J, L).ravel(),
                      np.repeat(np.arange(n), K), np.ones(n * K), (K * J * L, n))
    effect = values[yt[b, contrast, :]] - values[yt[b, 0, :]]    # (n, K)
    weighted = _sparse(np.tile(zs, n), np.repeat(np.arange(n), K), effect.ravel(), (K, n))
    violating_y = (yt != yt[:, :, :1]).any(axis=(1, 2))
    columns = Columns(observe=observe, balance=_sparse(np.array([], int), np.array([], int),
                                                       np.array([]), (0, n)),
                      violates=violating_y[b].astype(np.float64),
                      defies=is_defier(xt)[a].astype(np.float64),
                      fixed=np.zeros(n), weighted=weighted)
    return Design(upper=columns, lower=columns)


def _outcome_range(g: dict[int, int], level: int, values: np.ndarray) -> tuple[float, float]:
    """Range of a non-violating class's outcome at a treatment level: fixed by the data when
    the X-type takes that level, free otherwise."""
    if level in g:
        return float(values[g[level]]), float(values[g[level]])
    return float(values.min()), float(values.max())


def reduced_design(K: int, J: int, L: int, values: np.ndarray, contrast: int) -> Design:
    """The exact reduction described in the module docstring."""
    xt = x_types(K, J)
    n_x = len(xt)
    defier = is_defier(xt)
    low, high = float(values.min()), float(values.max())
    zs = np.arange(K)

    # Non-violating classes (X-type a, outcome g(x) on the treatments a takes).
    rows, cols, fixed_hi, fixed_lo, defies = [], [], [], [], []
    for i, a in enumerate(xt):
        taken = sorted(set(a.tolist()))
        for outcomes in itertools.product(range(L), repeat=len(taken)):
            g = dict(zip(taken, outcomes))
            column = len(fixed_hi)
            rows += [_row(z, a[z], g[a[z]], J, L) for z in range(K)]
            cols += [column] * K
            y1, y0 = _outcome_range(g, contrast, values), _outcome_range(g, 0, values)
            fixed_hi.append(y1[1] - y0[0])
            fixed_lo.append(y1[0] - y0[1])
            defies.append(defier[i])
    n_e = len(fixed_hi)

    # Violating marginals s(a, z, y), then totals m(a).
    n_s = n_x * K * L
    a_idx, z_idx, y_idx = (g.ravel() for g in np.meshgrid(np.arange(n_x), zs, np.arange(L),
                                                          indexing="ij"))
    s_cols = n_e + (a_idx * K + z_idx) * L + y_idx
    m_cols = n_e + n_s + np.arange(n_x)
    n = n_e + n_s + n_x
    taken = xt[a_idx, z_idx]
    rows = np.concatenate([np.asarray(rows, dtype=np.int64), _row(z_idx, taken, y_idx, J, L)])
    cols = np.concatenate([np.asarray(cols, dtype=np.int64), s_cols])
    observe = _sparse(rows, cols, np.ones(len(rows)), (K * J * L, n))
    balance = _sparse(np.concatenate([a_idx * K + z_idx, np.arange(n_x * K)]),
                      np.concatenate([s_cols, np.repeat(m_cols, K)]),
                      np.concatenate([np.ones(n_s), -np.ones(n_x * K)]), (n_x * K, n))
    y = values[y_idx]
    treated, base = taken == contrast, taken == 0
    hi = np.where(treated, y - low, np.where(base, high - y, high - low))
    lo = np.where(treated, y - high, np.where(base, low - y, low - high))
    violates = np.zeros(n)
    violates[m_cols] = 1.0
    defies_all = np.zeros(n)
    defies_all[:n_e] = defies
    defies_all[m_cols] = defier

    def columns(fixed: list[float], per_z: np.ndarray) -> Columns:
        return Columns(observe=observe, balance=balance, violates=violates, defies=defies_all,
                       fixed=np.concatenate([fixed, np.zeros(n_s + n_x)]),
                       weighted=_sparse(z_idx, s_cols, per_z, (K, n)))

    return Design(upper=columns(fixed_hi, hi), lower=columns(fixed_lo, lo))


def make_design(K: int, J: int, L: int, values: np.ndarray, contrast: int,
                enumeration: Enumeration = "reduced") -> Design:
    """Columns for the contrast of treatment level ``contrast`` against level 0."""
    if enumeration == "full":
        return full_design(K, J, L, values, contrast)
    if enumeration == "reduced":
        return reduced_design(K, J, L, values, contrast)
    raise InputError(f"enumeration must be 'reduced' or 'full'; got {enumeration!r}")
