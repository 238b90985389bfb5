"""Quantiles and tail probabilities of the reference laws, through ``scipy.special``.

``scipy.stats`` costs well over a second to import; the special functions give the same values
(they are what ``scipy.stats`` calls) at a fraction of the start-up time.
"""

from __future__ import annotations


def normal_quantile(p: float) -> float:
    """Quantile of the standard normal law."""
    from scipy.special import ndtri

    return float(ndtri(p))


def t_quantile(p: float, df: float) -> float:
    """Quantile of Student's t with ``df`` degrees of freedom."""
    from scipy.special import stdtrit

    return float(stdtrit(df, p))


def chi2_quantile(p: float, df: float) -> float:
    """Quantile of the chi-square law."""
    from scipy.special import chdtri

    return float(chdtri(df, 1.0 - p))


def chi2_sf(x: float, df: float) -> float:
    """Upper tail probability of the chi-square law."""
    from scipy.special import chdtrc

    return float(chdtrc(df, x))


def f_quantile(p: float, df1: float, df2: float) -> float:
    """Quantile of the F law."""
    from scipy.special import fdtri

    return float(fdtri(df1, df2, p))


def f_sf(x: float, df1: float, df2: float) -> float:
    """Upper tail probability of the F law."""
    from scipy.special import fdtrc

    return float(fdtrc(df1, df2, x))
