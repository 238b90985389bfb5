"""Layer 2, estimation: moments (one or two passes, in memory or in chunks), small linear
algebra, reference distributions, inference helpers and 2SLS from moments.

Modules, lowest first: ``moments``, ``linalg``, ``distributions``, ``inference``; then the 2SLS
pieces ``design`` (design maps and their checks), ``least_squares`` (one solve),
``covariance`` (score requests, sandwich, finite-sample factors), ``first_stage`` and
``diagnostics`` (Anderson–Rubin set, overidentification test); ``iv`` is the API that
assembles them (``fit``, ``IVFit``, ``Pieces``, ``prepare``)."""
