"""sensiv: sensitivity analysis for instrumental-variable estimates whose instrument may
violate the exclusion restriction.

The public face, loaded lazily so that importing ``sensiv`` (and ``sensiv --help``) stays
instant::

    import sensiv
    fit = sensiv.fit(source)                      # 2SLS with diagnostics
    res = sensiv.sweep(frame, outcome="y", treatment="x", instruments="z",
                       direct="-0.01:0.01")          # a DataFrame (pandas, polars) or a path
    res = sensiv.sweep(fitted, direct=(-0.01, 0.01))  # a fitted linearmodels / pyfixest IV model
    pri = sensiv.prior(frame, outcome="y", treatment="x", instruments="z",
                       prior="normal:0:0.005")

``fit``, ``sweep``, ``prior``, ``corrbound``, ``discrete``, ``published``,
``per_instrument``, ``calibrate`` and ``run_recipe`` are the analyses of the command line, with the CLI's option names and value
syntax as keywords (:mod:`sensiv.api`); ``sensiv.data`` reads the data
(``Spec``, ``from_file``, ``from_frame``).  The layers, lowest first: ``core``, ``data``,
``estimation``, ``partial_id``, ``sensitivity``, ``present``, ``analyses``, ``api``, ``recipes``, ``cli``.
"""

from __future__ import annotations

import importlib

from sensiv.core.version import __version__

# public name -> (module, attribute); resolved on first use
_PUBLIC = {
    "fit": ("sensiv.api.functions", "fit"),
    "sweep": ("sensiv.api.functions", "sweep"),
    "prior": ("sensiv.api.functions", "prior"),
    "corrbound": ("sensiv.api.functions", "corrbound"),
    "discrete": ("sensiv.partial_id.discrete", "discrete_bounds"),
    "published": ("sensiv.sensitivity.published", "published_analysis"),
    "per_instrument": ("sensiv.api.per_instrument", "per_instrument"),
    "calibrate": ("sensiv.api.functions", "calibrate"),
    "run_recipe": ("sensiv.recipes.run", "run_recipe"),
}

__all__ = ["__version__", *_PUBLIC]


def __getattr__(name: str):
    try:
        module, attribute = _PUBLIC[name]
    except KeyError:
        raise AttributeError(f"module 'sensiv' has no attribute {name!r}") from None
    value = getattr(importlib.import_module(module), attribute)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted({*globals(), *_PUBLIC})
