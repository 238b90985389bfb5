"""Discrete bounds: the 50-point ε curve (both ends), swept through cvxpy Parameters, against
re-building the programme for every point and against the full enumeration of response types.

Three ways to get the same curve are timed for each case:

* ``adaptive`` — what ``discrete_bounds`` does: the programme built once, budgets set as
  Parameter values, and spans on which the bounds are linear filled in from the chord
  (exact because the upper bound is concave and the lower bound convex in ε; see
  ``sensiv.partial_id.discrete_programme.curve``); the number of solves is printed;
* ``every point`` — the same Parameter sweep, one solve (both ends) per budget;
* ``re-build`` — a fresh cvxpy problem with the values as constants for every budget.

Cases (Z levels, X levels, Y levels), with the goal for the Parameter sweep of 50 budgets:

* binary Z, X, Y (64 response types) — under 0.3 s;
* ternary Z and Y, binary X (5,832 types) — under 1.5 s;
* 4-level Z and Y, binary X (1,048,576 types) — under 60 s.

Which reduction, and why it is exact
------------------------------------
The programme is not enumerated type by type: ``enumeration="reduced"`` (the default) merges
and decouples types exactly, so the large case is a few hundred variables (the docstring of
``sensiv.partial_id.discrete_programme`` has the argument):

1. The data see a unit only through its treatment at each ``z`` and the outcome on its own
   path ``y_z = Y(X(z), z)``.  Counterfactual outcomes enter only the objective and the
   violation flag, so each class (X-type, path) is replaced by its best member (upper bound)
   or worst member (lower bound); non-violating members exist only for paths that are
   constant in ``z`` within each treatment level and are kept as separate, budget-free
   classes.  Same optimum: any solution of one programme maps to a solution of the other
   with the same data fit, no larger budget use and at least (at most) the same effect.
2. For violating classes the data rows, the effect, the budget and the defier share all add
   over ``z`` given the X-type, so only the per-``z`` marginals ``s(a, z, y)`` matter; any set
   of marginals with a common total is reproduced by the product coupling.  ``L^K`` paths
   per X-type become ``K·L`` marginals with ``K`` balance equations.

Column generation was not needed: after the reduction the largest binary-X case has 504
variables per bound.  The test suite checks the reduced programme against the full
enumeration wherever the latter fits (up to 5,832 types) at 1e-7.

Timing: best of ``--repeats`` wall-clock runs after an untimed warm-up that compiles each
programme once (the first solve of a DPP programme canonicalises it; later solves only map
the parameter values).  The re-build reference constructs a fresh cvxpy problem with the
values as constants for every budget (canonicalisation included), the way a plain loop
would.  On a shared machine the absolute times vary; the ratios are the point.

Usage: ``python tests/benchmarks/bench_discrete.py [--points 50] [--repeats 3]``.
Prints times, ratios and PASS/MISS per goal; the exit code is 0 whatever the outcome.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

CASES = (
    ("binary Z, X, Y", (2, 2, 2), 0.3),
    ("ternary Z and Y, binary X", (3, 2, 3), 1.5),
    ("4-level Z and Y, binary X", (4, 2, 4), 60.0),
)
SWEEP_RATIO_TARGET = 3.0
SEED = 20260101


def table(shape, seed: int) -> np.ndarray:
    """Counts from a random response-type model that satisfies the exclusion restriction
    (invented, for timing only), so that every budget on the curve fits."""
    from sensiv.partial_id.discrete_types import x_types

    K, J, L = shape
    rng = np.random.default_rng(seed)
    share = np.zeros(shape)
    xt = x_types(K, J)
    for _ in range(20):
        g = rng.integers(0, L, size=J)
        mix = rng.dirichlet(np.ones(len(xt)))
        for a, pa in zip(xt, mix):
            for z in range(K):
                share[z, a[z], g[a[z]]] += pa / 20
    return np.rint(share * 10_000).astype(np.int64) + 1


def best_time(function, repeats: int):
    best, result = float("inf"), None
    for _ in range(repeats):
        start = time.perf_counter()
        result = function()
        best = min(best, time.perf_counter() - start)
    return best, result


def sweep(programmes, grid):
    return np.array([programmes.interval(1, e, 1.0) for e in grid])


def adaptive(programmes, grid):
    from sensiv.partial_id.discrete_programme import curve

    return np.array(curve(programmes, 1, grid, 1.0, programmes.min_budget(1.0)))


def count_solves(programmes, function, *args) -> int:
    """Number of interval solves ``function(programmes, *args)`` makes."""
    calls = []
    solve_one = programmes.interval
    programmes.interval = lambda *a: calls.append(a) or solve_one(*a)
    try:
        function(programmes, *args)
    finally:
        del programmes.interval
    return len(calls)


def rebuild_sweep(design, counts, grid):
    """The same interval programme with constants instead of Parameters, built per point."""
    import cvxpy as cp

    from sensiv.partial_id.solver import solve

    per_z = counts.sum(axis=(1, 2))
    observed = (counts / per_z[:, None, None]).ravel()
    weights = per_z / per_z.sum()
    ends = []
    for e in grid:
        variables, constraints, effects = [], [], []
        for columns in (design.upper, design.lower):
            v = cp.Variable(columns.size, nonneg=True)
            constraints += [columns.observe @ v == observed,
                            columns.balance @ v == 0,
                            columns.violates @ v <= e]
            effects.append((columns.fixed + columns.weighted.T @ weights) @ v)
            variables.append(v)
        problem = cp.Problem(cp.Maximize(effects[0] - effects[1]), constraints)
        solution = solve(problem, what="re-built discrete bounds programme")
        if solution.outcome != "optimal":
            raise RuntimeError(f"re-built programme: {solution.status}")
        ends.append((float(effects[1].value), float(effects[0].value)))
    return np.array(ends)


def main(argv=None) -> int:
    from sensiv.partial_id.discrete_programme import Programmes
    from sensiv.partial_id.discrete_types import MAX_FULL_TYPES

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, default=50)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args(argv)
    import cvxpy  # noqa: F401  (imported before any timer: import time is not build time)

    print(f"discrete bounds, {args.points}-point ε curve in [0, 1], both ends per solve; "
          f"best of {args.repeats}")
    for name, shape, target in CASES:
        K, J, L = shape
        counts = table(shape, SEED + K * 100 + L)
        grid = np.linspace(0.0, 1.0, args.points)
        values = np.arange(L, dtype=float)

        start = time.perf_counter()
        programmes = Programmes(shape, values)
        programmes.set_data(counts)
        programmes.interval(1, 0.5, 1.0)  # warm-up: compile the DPP programme once
        build = time.perf_counter() - start
        swept, curve = best_time(lambda: sweep(programmes, grid), args.repeats)
        fast, fast_curve = best_time(lambda: adaptive(programmes, grid), args.repeats)
        n_solves = count_solves(programmes, adaptive, grid)
        rebuilt, again = best_time(
            lambda: rebuild_sweep(programmes.designs[1], counts, grid), args.repeats)
        n_types = J ** K * L ** (J * K)
        size = programmes.designs[1].upper.size
        print(f"\n{name}: {n_types:,} response types; reduced programme {size} variables per "
              f"bound ({2 * size} per solve)")
        print(f"  build + first solve     {build:8.3f} s")
        print(f"  adaptive (as used)      {fast:8.3f} s   goal < {target:g} s: "
              f"{'PASS' if fast < target else 'MISS'}   ({n_solves} solves + 1 for the "
              f"smallest budget; max |difference| {np.abs(fast_curve - curve).max():.1e})")
        print(f"  every point             {swept:8.3f} s   goal < {target:g} s: "
              f"{'PASS' if swept < target else 'MISS'}   ({1e3 * swept / len(grid):.1f} ms "
              "per budget)")
        ratio = rebuilt / swept
        print(f"  re-build every point    {rebuilt:8.3f} s   ratio to every point {ratio:5.1f}x "
              f"(goal >= {SWEEP_RATIO_TARGET:g}x: "
              f"{'PASS' if ratio >= SWEEP_RATIO_TARGET else 'MISS'}); "
              f"max |difference| {np.abs(curve - again).max():.1e}")
        if n_types <= MAX_FULL_TYPES:
            start = time.perf_counter()
            full = Programmes(shape, values, enumeration="full")
            full.set_data(counts)
            full.interval(1, 0.5, 1.0)
            full_build = time.perf_counter() - start
            full_time, full_curve = best_time(lambda: sweep(full, grid), args.repeats)
            print(f"  full, every point       {full_time:8.3f} s   ratio to every point "
                  f"{full_time / swept:5.1f}x (build {full_build:.2f} s); max |difference| "
                  f"from reduced {np.abs(curve - full_curve).max():.1e}")
        else:
            print(f"  full enumeration        not built: {n_types:,} types exceed its limit of "
                  f"{MAX_FULL_TYPES:,}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
