"""Invented demo data: seeded generators with a documented truth, the demo recipe, and the
example files they make.

Everything in this package is **invented**: the river district, its villages, the clinic that
sends text messages and the published table describe no real place, person or study.  Each
generator draws from :func:`numpy.random.default_rng` with a fixed seed and documents the true
parameters it used, so a demo can show where the truth falls relative to an interval.

Scenarios
---------
``irrigation``
    Continuous treatment and outcome.  Plot height above the canal intake moves irrigation
    hours (water is cheaper downhill) but also changes maize yield directly.
``nudge``
    Binary instrument, treatment and outcome.  A randomised text message moves attendance at a
    blood-pressure screening, and may also change diet directly.
``published_table``
    Only the numbers an invented article prints: estimate, standard errors and first stage.

Modules: ``generators`` (the data and their truth), ``recipe`` (the demo recipe), ``files``
(the example files).  Run ``python -m sensiv.demo DIR`` to write the example files into ``DIR``
(default ``examples``).
"""

from sensiv.demo.files import csv_bytes, main, write_examples
from sensiv.demo.generators import (IRRIGATION_N_VILLAGES, DemoData, irrigation, nudge,
                                    published_table)
from sensiv.demo.recipe import demo_recipe

__all__ = [
    "DemoData",
    "irrigation",
    "nudge",
    "published_table",
    "write_examples",
]
