"""Partial identification by optimisation (cvxpy): bounds under assumptions weaker than the
exclusion restriction.

Modules
-------
``solver``
    Solving a cvxpy problem quietly and mapping every solver status to a result or a warning.
"""
