r"""Tests that come with a 2SLS fit: the Anderson–Rubin confidence set for one treatment and
the test of overidentifying restrictions.

The Anderson–Rubin set inverts, exactly and without a grid, the test of ``ρ − b π = 0`` (reduced
form minus ``b`` times first stage) with the joint covariance of the first stage; it stays valid
however weak the instruments are, and may be unbounded or a union of intervals.  The
overidentification test is Sargan's with a classic covariance and Wooldridge's score test with
a robust or cluster one.

Functions that take ``pieces`` read the pass-1 algebra of :class:`sensiv.estimation.iv.Pieces`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sensiv.core.results import Interval, json_number
from sensiv.estimation import distributions as dist
from sensiv.estimation import linalg
from sensiv.estimation.covariance import overid_maps
from sensiv.estimation.moments import ScoreSums


@dataclass(frozen=True, slots=True)
class OverId:
    """Test of overidentifying restrictions."""

    name: str
    stat: float
    df: int
    p_value: float

    def to_dict(self) -> dict:
        return {"name": self.name, "stat": json_number(self.stat), "df": self.df,
                "p_value": json_number(self.p_value)}


def anderson_rubin_set(pieces, joint: np.ndarray, coef: np.ndarray, level: float,
                       small: bool) -> tuple[Interval, ...]:
    """Anderson–Rubin confidence set for one treatment, by inverting the AR test exactly."""
    k_z = coef.shape[0]
    pi, rho = coef[:, 0], coef[:, 1]
    if small:
        df2 = pieces.n - pieces.design.instrument_set.shape[1] - pieces.absorbed_parameters
        critical = k_z * dist.f_quantile(level, k_z, df2)
    else:
        critical = dist.chi2_quantile(level, k_z)
    return linalg.quadratic_ratio_set(rho, pi, joint[1, :, 1, :], joint[1, :, 0, :],
                                      joint[0, :, 0, :], critical)


def overid_test(pieces, sums: ScoreSums | None, se: str) -> OverId | None:
    """Sargan (classic) or Wooldridge score (robust, cluster) test; ``None`` when exactly
    identified.  ``sums`` holds the ``"overid"`` meat requested by
    :func:`sensiv.estimation.covariance.score_blocks`."""
    d = pieces.design
    df = d.z.shape[1] - d.x.shape[1]
    if df == 0:
        return None
    u = pieces.tsls.residual
    gram = pieces.gram
    if se == "classic":
        explained = pieces.tsls.instrument_chol.whiten(d.instrument_set.T @ gram @ u)
        stat = pieces.n * float(explained @ explained) / float(u @ gram @ u)
        name = "Sargan"
    else:
        q = overid_maps(pieces)
        score = q.T @ gram @ u
        stat = linalg.wald_statistic(score, sums.meats["overid"])
        name = ("Wooldridge score (heteroskedasticity-robust)" if se == "robust"
                else "Wooldridge score (cluster-robust)")
    return OverId(name, float(stat), df, dist.chi2_sf(stat, df))
