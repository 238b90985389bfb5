"""Layer 6, analyses: the registry — one frozen entry per analysis kind (its name, how a
recipe entry is validated and run, its table rows, its figures, its text) — through which
``present`` output bundles, ``recipes`` and ``cli`` find an analysis."""
