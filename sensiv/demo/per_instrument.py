"""An invented per-instrument table: the published associations of a made-up many-instrument
study (one row per instrument, as a Mendelian randomisation paper prints them).

Everything here is **invented**: the variants ``v01``..``v25`` and their numbers describe no
real gene, trait or study.  Truth: effect ``PER_INSTRUMENT_BETA`` of the treatment on the
outcome; the first ``PER_INSTRUMENT_INVALID`` instruments have a direct effect
``PER_INSTRUMENT_DIRECT`` on the outcome (pleiotropy), the others none.  Drawn with
:func:`numpy.random.default_rng` seeded by ``PER_INSTRUMENT_SEED``; first-stage and
reduced-form associations estimated in two independent invented samples.
"""

from __future__ import annotations

import numpy as np

PER_INSTRUMENT_SEED = 20261217
PER_INSTRUMENT_COUNT = 25
PER_INSTRUMENT_BETA = 0.30
PER_INSTRUMENT_DIRECT = 0.02
PER_INSTRUMENT_INVALID = 5
DECIMALS = 5


def per_instrument_table(seed: int = PER_INSTRUMENT_SEED):
    """The invented table as a pandas frame: ``variant``, ``beta_exposure``, ``se_exposure``,
    ``beta_outcome``, ``se_outcome`` (rounded to ``DECIMALS``)."""
    import pandas as pd

    rng = np.random.default_rng(seed)
    j = PER_INSTRUMENT_COUNT
    strength = rng.uniform(0.03, 0.12, j) * rng.choice([-1.0, 1.0], j)
    se_x = rng.uniform(0.004, 0.008, j)
    se_y = rng.uniform(0.006, 0.012, j)
    direct = np.where(np.arange(j) < PER_INSTRUMENT_INVALID,
                      PER_INSTRUMENT_DIRECT * np.sign(strength), 0.0)
    bx = strength + se_x * rng.standard_normal(j)
    by = PER_INSTRUMENT_BETA * strength + direct + se_y * rng.standard_normal(j)
    return pd.DataFrame({"variant": [f"v{k + 1:02d}" for k in range(j)],
                         "beta_exposure": np.round(bx, DECIMALS),
                         "se_exposure": np.round(se_x, DECIMALS),
                         "beta_outcome": np.round(by, DECIMALS),
                         "se_outcome": np.round(se_y, DECIMALS)})


def per_instrument_csv() -> bytes:
    """The invented table as CSV bytes with fixed decimals (byte-reproducible)."""
    frame = per_instrument_table()
    lines = [",".join(frame.columns)]
    for row in frame.itertuples(index=False):
        lines.append(",".join([row[0], *(f"{v:.{DECIMALS}f}" for v in row[1:])]))
    return ("\n".join(lines) + "\n").encode("utf-8")
