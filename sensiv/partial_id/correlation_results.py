"""Result objects of the correlation-restriction bounds
(:func:`sensiv.partial_id.correlation.correlation_bounds`): the set at each ratio, the
bootstrap summary and the full result, with their JSON form.  The plain-text and markdown
summaries are built in :mod:`sensiv.present.text_correlation`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from sensiv.core.results import Interval, Presentable, describe, format_number, json_number
from sensiv.data.where import filter_assumptions
from sensiv.estimation.absorb import Absorption

CAUTION = ("Caution: these bounds hold only under the stated correlation restriction (each "
           "instrument correlated with the error in the treatment's direction and at most r̄ "
           "times as strongly); they do not prove any instrument valid, and a different "
           "restriction gives different bounds.")


@dataclass(frozen=True, slots=True)
class CurvePoint:
    """The identified set at one value of the ratio bound ``r̄``.

    ``pieces`` is empty when the set is empty; an unbounded end is ``±inf``.
    """

    max_ratio: float
    pieces: tuple[Interval, ...]

    @property
    def hull(self) -> Interval | None:
        """The smallest interval holding every piece (``None`` when the set is empty)."""
        if not self.pieces:
            return None
        return Interval(self.pieces[0].low, self.pieces[-1].high)

    def to_dict(self) -> dict:
        hull = self.hull
        return {"max_ratio": self.max_ratio,
                "lower": json_number(hull.low) if hull else None,
                "upper": json_number(hull.high) if hull else None,
                "empty": hull is None,
                "pieces": [p.to_list() for p in self.pieces]}


@dataclass(frozen=True, slots=True)
class BootstrapSummary:
    """Nonparametric bootstrap of the two bounds at ``max_ratio``.

    A replicate is *used* when its set is non-empty and every end that is finite in the
    estimate is finite in the replicate; the others are counted (``n_empty``: empty set,
    ``n_unbounded``: an end unbounded that is bounded in the estimate, ``n_degenerate``: a
    partialled variable without variation in the resample) and left out.
    """

    reps: int
    seed: int
    clusters: int | None
    n_used: int
    n_empty: int
    n_unbounded: int
    n_degenerate: int
    se_lower: float
    se_upper: float
    ci: Interval | None

    @property
    def n_failed(self) -> int:
        return self.reps - self.n_used

    def to_dict(self) -> dict:
        return {"reps": self.reps, "seed": self.seed,
                "resampled": "clusters" if self.clusters is not None else "rows",
                "n_used_reps": self.n_used, "n_failed_reps": self.n_failed,
                "n_empty_reps": self.n_empty, "n_unbounded_reps": self.n_unbounded,
                "n_degenerate_reps": self.n_degenerate,
                "se_lower": json_number(self.se_lower), "se_upper": json_number(self.se_upper)}


@dataclass(frozen=True, slots=True)
class CorrelationBounds(Presentable):
    """Identified set for the treatment effect under the Nevo & Rosen (2012) restriction.

    Attributes
    ----------
    pieces : tuple of Interval
        The identified set at ``max_ratio`` as disjoint, sorted intervals (empty: no piece).
    pieces_by_sign : tuple of (str, Interval or None)
        The piece for each admissible sign of ``corr(X, u)`` ("positive", "negative").
    curve : tuple of CurvePoint
        The set on a grid of ``r̄`` from 0 to ``max_ratio``.
    breakdown_ratio : float or None
        Smallest ``r̄ ≤ 1`` whose set contains ``threshold`` (exact), ``None`` if none.
    min_ratio_consistent : float or None
        Smallest ``r̄`` with a non-empty set (an infimum), 0 when the exclusion restriction is
        not contradicted, ``None`` when even ``r̄ = 1`` gives an empty set.
    bootstrap : BootstrapSummary or None
        ``None`` when ``reps = 0`` or the set is empty.
    """

    outcome: str
    treatment: str
    instruments: tuple[str, ...]
    controls: tuple[str, ...]
    constant: bool
    n: int
    n_dropped: int
    weighted: bool
    max_ratio: float
    endogeneity: str
    threshold: float
    confidence_level: float
    tsls: float
    ols: float
    instrument_treatment_corr: tuple[float, ...]
    pieces: tuple[Interval, ...]
    pieces_by_sign: tuple[tuple[str, Interval | None], ...]
    curve: tuple[CurvePoint, ...]
    breakdown_ratio: float | None
    min_ratio_consistent: float | None
    bootstrap: BootstrapSummary | None
    notes: tuple[str, ...]
    n_filtered: int = 0
    where: str | None = None
    absorption: Absorption | None = None
    first_pieces: tuple[Interval, ...] = ()   # the set at the smallest consistent r̄

    @property
    def caution(self) -> str:
        return CAUTION

    @property
    def first_side(self) -> str | None:
        """Where the set at the smallest consistent r̄ lies against the threshold: "above",
        "below", "contains" (no conclusion), or ``None`` when no r̄ ≤ 1 is consistent."""
        if not self.first_pieces:
            return None
        if any(p.contains(self.threshold) for p in self.first_pieces):
            return "contains"
        return "above" if self.first_pieces[0].low > self.threshold else "below"

    @property
    def sign_reversal(self) -> bool:
        """True when the first consistent set lies wholly on the other side of the threshold
        from the 2SLS estimate (possible only when the set at r̄ = 0 is empty: the assumed
        endogeneity sign contradicts 2SLS)."""
        side = self.first_side
        if side not in ("above", "below") or not math.isfinite(self.tsls):
            return False
        return (side == "above") != (self.tsls > self.threshold)

    @property
    def conclusion(self) -> str:
        """The conclusion that the breakdown ratio breaks, in words: the one at r̄ = 0, or at
        the smallest consistent r̄ when the set at r̄ = 0 is empty."""
        side = self.first_side
        theta = format_number(self.threshold)
        if side is None:
            return "none: no r̄ ≤ 1 is consistent with the data"
        if side == "contains":
            return f"none: the set already contains {theta}"
        sign = ">" if side == "above" else "<"
        return f"{self.treatment} effect {sign} {theta}"

    @property
    def empty(self) -> bool:
        return not self.pieces

    @property
    def identified_set(self) -> Interval | None:
        """The hull of the pieces (``None`` when the set is empty)."""
        if not self.pieces:
            return None
        return Interval(self.pieces[0].low, self.pieces[-1].high)

    @property
    def ci(self) -> Interval | None:
        return self.bootstrap.ci if self.bootstrap is not None else None

    def assumptions(self) -> list[str]:
        controls = (", ".join(self.controls) + (" and a constant" if self.constant else "")
                    if self.controls else ("a constant" if self.constant else "nothing"))
        sign = {"positive": "the treatment is positively correlated with the error (OLS "
                            "biased upwards)",
                "negative": "the treatment is negatively correlated with the error (OLS "
                            "biased downwards)",
                "unknown": "the sign of the treatment's correlation with the error is not "
                           "assumed: the set is the union over both signs"}[self.endogeneity]
        out = [
            f"linear model with a constant effect of '{self.treatment}' on '{self.outcome}'; "
            f"correlations are taken after partialling out {controls}",
            "each instrument is correlated with the structural error in the same direction as "
            "the treatment (Nevo & Rosen 2012)",
            f"each instrument's correlation with the error is at most r̄ = "
            f"{format_number(self.max_ratio)} times the treatment's in absolute value "
            "(r̄ = 0 is the exclusion restriction)",
            sign,
        ] + filter_assumptions(self.where, self.n_filtered) + (
            self.absorption.assumptions() if self.absorption is not None else [])
        if self.bootstrap is not None:
            unit = (f"whole clusters ({self.bootstrap.clusters})"
                    if self.bootstrap.clusters is not None else "rows")
            out.append(
                f"inference: nonparametric bootstrap resampling {unit}, {self.bootstrap.reps} "
                "replicates, for the standard errors of the two bounds, and the Imbens & "
                "Manski (2004) interval for the coefficient; this treats the bounds as smooth "
                "in the data, which fails near a ratio where an end becomes unbounded or the "
                "set becomes empty")
            if self.absorption is not None:
                out.append(
                    "bootstrap with absorbed fixed effects: every replicate resamples the "
                    "demeaned rows, with the level means held at their full-sample values (not "
                    "re-absorbed per replicate); this ignores the sampling error of the level "
                    "means, which is small when every level holds many rows")
        return out

    def to_dict(self) -> dict:
        hull = self.identified_set
        ci = self.ci
        out = {
            "identified_set": hull.to_list() if hull else None,
            "empty": self.empty,
            "pieces": [p.to_list() for p in self.pieces],
            "by_sign": {name: (piece.to_list() if piece else None)
                        for name, piece in self.pieces_by_sign},
            "ci": ci.to_list() if ci else None,
            "confidence_level": self.confidence_level,
            "curve": [point.to_dict() for point in self.curve],
            "breakdown_ratio": json_number(self.breakdown_ratio),
            "breakdown_method": "exact (membership of the threshold is linear in r̄)",
            "breakdown_meaning": ("the first r̄ at which the conclusion at r̄ = 0 (or, when the "
                                  "set there is empty, at the smallest consistent r̄) stops "
                                  "holding: the set reaches the threshold"),
            "conclusion": self.conclusion,
            "first_set": [p.to_list() for p in self.first_pieces],
            "sign_reversal": self.sign_reversal,
            "threshold": self.threshold,
            "threshold_in_set": any(p.contains(self.threshold) for p in self.pieces),
            "min_ratio_consistent": json_number(self.min_ratio_consistent),
            "min_ratio_method": "exact (Charnes-Cooper linear programme per sign)",
            "max_ratio": self.max_ratio,
            "endogeneity": self.endogeneity,
            "tsls": json_number(self.tsls),
            "ols": json_number(self.ols),
            "instrument_treatment_corr": dict(zip(self.instruments,
                                                  map(json_number,
                                                      self.instrument_treatment_corr))),
            "outcome": self.outcome,
            "treatment": self.treatment,
            "instruments": list(self.instruments),
            "controls": list(self.controls),
            "constant": self.constant,
            "n": self.n,
            "n_dropped": self.n_dropped,
            "n_filtered": self.n_filtered,
            "where": self.where,
            "weighted": self.weighted,
            "bootstrap": self.bootstrap.to_dict() if self.bootstrap else None,
            "n_failed_reps": self.bootstrap.n_failed if self.bootstrap else None,
            "notes": list(self.notes),
            "assumptions": self.assumptions(),
            "caution": CAUTION,
        } | (self.absorption.to_dict() if self.absorption is not None else {})
        return out

    def __str__(self) -> str:
        return describe(self)
