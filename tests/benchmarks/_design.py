"""Simulated data shared by the benchmark scripts (invented data, for timing only).

One treatment ``x``, one instrument ``z`` and ``N_CONTROLS`` numeric controls ``w1..w10``;
the error is correlated with the treatment (so 2SLS differs from OLS) and heteroskedastic in
the instrument (so robust standard errors differ from classic ones).

Rows are generated in blocks, each from its own seeded stream, so a file written block by
block holds exactly the rows that :func:`frame` returns for the same ``n`` and ``block``.
numpy, pandas and sensiv are imported only when a function is called, so that a parent
process that merely orchestrates children stays small.
"""

from __future__ import annotations

from collections.abc import Iterator

N_CONTROLS = 10
SEED = 20240601
DEFAULT_BLOCK = 1_000_000
"""Rows generated at a time; memory of the generator is bounded by this, not by ``n``."""

OUTCOME = "y"
TREATMENT = "x"
INSTRUMENT = "z"
CONTROLS = tuple(f"w{j}" for j in range(1, N_CONTROLS + 1))
COLUMNS = (OUTCOME, TREATMENT, INSTRUMENT, *CONTROLS)

TRUE_EFFECT = 2.0
FIRST_STAGE = 0.5
ENDOGENEITY = 0.8  # loading of the treatment's unobserved shock on the outcome error


def spec():
    """The :class:`sensiv.data.Spec` of the design."""
    from sensiv.data import Spec

    return Spec(outcome=OUTCOME, treatments=(TREATMENT,), instruments=(INSTRUMENT,),
                controls=CONTROLS)


def block(start: int, rows: int, index: int):
    """Rows ``start .. start + rows`` as a DataFrame; ``index`` numbers the block for its seed."""
    import numpy as np
    import pandas as pd

    rng = np.random.default_rng([SEED, index])
    # Controls with distinct means and spreads, as real covariates have.
    means = np.linspace(-2.0, 5.0, N_CONTROLS)
    scales = np.linspace(0.5, 3.0, N_CONTROLS)
    w = rng.standard_normal((rows, N_CONTROLS)) * scales + means
    z = rng.standard_normal(rows) + 0.3 * w[:, 0]
    shock = rng.standard_normal(rows)
    loadings = np.linspace(0.3, -0.3, N_CONTROLS)
    x = FIRST_STAGE * z + (w - means) @ loadings + shock
    noise = rng.standard_normal(rows) * (1.0 + np.abs(z))
    effects = np.linspace(-0.5, 0.5, N_CONTROLS)
    y = 1.0 + TRUE_EFFECT * x + (w - means) @ effects + ENDOGENEITY * shock + noise
    data = {OUTCOME: y, TREATMENT: x, INSTRUMENT: z}
    data.update({name: w[:, j] for j, name in enumerate(CONTROLS)})
    return pd.DataFrame(data, index=pd.RangeIndex(start, start + rows))


def blocks(n: int, rows_per_block: int = DEFAULT_BLOCK) -> Iterator:
    """The ``n`` rows as consecutive DataFrames of at most ``rows_per_block`` rows."""
    for index, start in enumerate(range(0, n, rows_per_block)):
        yield block(start, min(rows_per_block, n - start), index)


def frame(n: int, rows_per_block: int = DEFAULT_BLOCK):
    """All ``n`` rows in one DataFrame (the same rows as :func:`blocks`)."""
    import pandas as pd

    parts = list(blocks(n, rows_per_block))
    return parts[0] if len(parts) == 1 else pd.concat(parts)


def relative_difference(actual, expected) -> float:
    """Largest ``|a − e| / |e|`` over matching entries (``|e|`` of zero counts as one)."""
    import numpy as np

    actual = np.asarray(actual, dtype=float)
    expected = np.asarray(expected, dtype=float)
    scale = np.where(expected != 0.0, np.abs(expected), 1.0)
    return float(np.max(np.abs(actual - expected) / scale))


def verdict(ok: bool) -> str:
    return "PASS" if ok else "MISS"


def best_of(work, repeats: int) -> float:
    """The shortest wall time of ``repeats`` calls of ``work()``, in seconds."""
    import time

    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        work()
        times.append(time.perf_counter() - start)
    return min(times)
