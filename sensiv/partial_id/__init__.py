"""Partial identification by optimisation (cvxpy): bounds under assumptions weaker than the
exclusion restriction.

Modules
-------
``solver``
    Solving a cvxpy problem quietly and mapping every solver status to a result or a warning.
``correlation``, ``correlation_moments``, ``correlation_programme``,
``correlation_bootstrap``, ``correlation_results``
    Nevo & Rosen (2012) bounds when instruments may be correlated with the error, in the
    treatment's direction and at most a given ratio as strongly: the entry point and its
    checks; partial correlations, the one-instrument closed form and exact elimination; the
    cvxpy programmes; the bootstrap; the result objects.
``discrete``, ``discrete_programme``, ``discrete_data``, ``discrete_results``, ``discrete_types``
    Balke & Pearl (1997) bounds for discrete data, relaxed by a budget for exclusion violations
    (reduced exact programmes), with Pearl's (1995) instrumental inequality.
"""
