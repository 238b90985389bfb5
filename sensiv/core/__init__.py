"""Layer 0, core: what every layer shares — the errors and warnings the caller can see
(``errors``) and the small result types and number formatting (``results``)."""
