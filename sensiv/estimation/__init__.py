"""Layer 2, estimation: moments (one or two passes, in memory or in chunks), small linear
algebra, reference distributions, inference helpers and 2SLS from moments."""
