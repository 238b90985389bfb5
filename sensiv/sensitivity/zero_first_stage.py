r"""The zero-first-stage estimate of the direct effect (van Kippersluis & Rietveld 2018).

In a subgroup where the instrument is believed not to move the treatment, ``ρ = βπ + γ``
collapses to ``ρ = γ``, so the subgroup's reduced-form coefficient (with its standard error)
estimates the direct effect; it is offered as a normal prior for ``sensiv prior`` and as a
range for ``sensiv sweep``.  This module selects and checks the subgroup, fits its first stage
and reduced form from moments, and reports the estimate with its premise check.

The subgroup is a row filter, ``(where) and marker == 1``, on the same data and engine
(:mod:`sensiv.data.subsets`): a DataFrame in memory, or files and DuckDB tables read again by
the numpy, DuckDB or Dask engine; its marker is counted on that engine first.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from sensiv.core.errors import ConstantControlError, InputError
from sensiv.core.results import Interval, json_number
from sensiv.data.datasets import origin_columns
from sensiv.data.spec import cluster_columns, row_filter
from sensiv.data.subsets import IndicatorCounts, count_kept, marked, reread
from sensiv.estimation import distributions as dist
from sensiv.estimation.absorbed_source import absorb_source
from sensiv.estimation.covariance import check_clusters, combine_two_way, normalise_weights
from sensiv.estimation.design import CONSTANT, Design
from sensiv.estimation.first_stage import first_stage_covariance
from sensiv.estimation import iv, linalg
from sensiv.estimation.moments import Moments, ScoreBlock
from sensiv.estimation.passes import indicator_counts_of, moments_of, scores_of
from sensiv.sensitivity.yardsticks import (OPTION_DIGITS, design_for, outward, partialled,
                                           range_option)
from sensiv.sensitivity.direct_sets import Scale


@dataclass(frozen=True, slots=True)
class ZeroFirstStage:
    """Direct-effect estimate from a subgroup with no first stage (van Kippersluis & Rietveld
    2018).

    In the subgroup the reduced form is ``ρ = βπ + γ``; if ``π = 0`` there, ``ρ = γ``.  The
    estimate rests on that premise (checked through ``first_stage_f``) and on the direct
    effect being the same in the subgroup as in the whole sample.  ``contamination`` is
    ``π̂'β̂`` per instrument: what the subgroup's reduced form would carry besides ``γ`` if the
    effect there were the full-sample 2SLS estimate ``β̂``.  ``interval`` is the confidence
    interval ``γ̂ ± critical · se`` per instrument (outcome units), ``interval_rf`` the same
    interval as a share of the full-sample reduced form.
    """

    group: str
    n: int
    n_dropped: int
    n_marker_missing: int
    instruments: tuple[str, ...]
    treatments: tuple[str, ...]
    se_type: str
    confidence_level: float
    critical: float
    first_stage: dict[str, dict[str, float]]
    first_stage_f: dict[str, float]
    first_stage_p_value: dict[str, float]
    direct: np.ndarray
    covariance: np.ndarray
    direct_rf: tuple[float, ...]
    direct_sd: tuple[float, ...]
    contamination: tuple[float, ...]
    controls_dropped: tuple[str, ...]
    interval: tuple[Interval, ...] = ()
    interval_rf: tuple[Interval, ...] = ()

    @property
    def se(self) -> np.ndarray:
        return np.sqrt(np.maximum(np.diag(self.covariance), 0.0))

    @property
    def premise_doubtful(self) -> bool:
        """True when some first-stage F in the subgroup reaches the weak-instrument rule of
        thumb (:data:`sensiv.estimation.iv.WEAK_F`): the instrument seems to move the
        treatment there."""
        return any(f >= iv.WEAK_F for f in self.first_stage_f.values())

    @property
    def prior_options(self) -> tuple[str, ...]:
        """One ``normal:MEAN:SD`` law per instrument (the SD rounded up)."""
        return tuple(f"normal:{d:.{OPTION_DIGITS}g}:{outward(s, up=True):.{OPTION_DIGITS}g}"
                     for d, s in zip(self.direct, self.se))

    @property
    def sweep_options(self) -> tuple[str, ...]:
        """One ``--direct`` range per instrument: estimate ± critical value × SE."""
        return tuple(range_option(d - self.critical * s, d + self.critical * s)
                     for d, s in zip(self.direct, self.se))

    def to_dict(self) -> dict:
        names = self.instruments
        return {
            "group": self.group, "n": self.n, "n_dropped": self.n_dropped,
            "n_marker_missing": self.n_marker_missing,
            "se_type": self.se_type, "confidence_level": self.confidence_level,
            "first_stage": {t: {z: json_number(v) for z, v in c.items()}
                            for t, c in self.first_stage.items()},
            "first_stage_f": {t: json_number(v) for t, v in self.first_stage_f.items()},
            "first_stage_p_value": {t: json_number(v)
                                    for t, v in self.first_stage_p_value.items()},
            "premise_doubtful": self.premise_doubtful,
            "direct": dict(zip(names, map(json_number, self.direct))),
            "se": dict(zip(names, map(json_number, self.se))),
            "direct_rf": dict(zip(names, map(json_number, self.direct_rf))),
            "direct_sd": dict(zip(names, map(json_number, self.direct_sd))),
            "direct_ci": {z: i.to_list() for z, i in zip(names, self.interval)},
            "direct_ci_rf": {z: i.to_list() for z, i in zip(names, self.interval_rf)},
            "covariance": self.covariance.tolist(),
            "contamination": dict(zip(names, map(json_number, self.contamination))),
            "prior": list(self.prior_options),
            "sweep_direct": list(self.sweep_options),
            "controls_dropped": list(self.controls_dropped),
        }


def marker_counts(data, column: str, spec) -> IndicatorCounts:
    """The counts of the subgroup marker ``column`` among the rows of ``data`` that the row
    filter of ``spec`` keeps (``data`` a DataFrame, or a source read from files, a DuckDB
    table or a Dask DataFrame, counted on its engine with its own filter).

    Raises
    ------
    InputError
        The column is absent, not numeric or boolean, or takes values other than 0 and 1, or
        no row has the value 1.
    """
    is_source = hasattr(data, "chunks")
    available = (origin_columns(data.origin) if is_source else
                 [str(c) for c in data.columns])
    if column not in available:
        close = [c for c in available if c.lower() == column.lower()]
        hint = f"; did you mean {close[0]!r}?" if close else ""
        raise InputError(f"--no-first-stage-group column {column!r} not found in the data"
                         f"{hint}; name a 0/1 column that marks the subgroup")
    if is_source:
        counts = indicator_counts_of(data, column)
    else:
        tree = row_filter(spec)
        counts = count_kept(data, column, None if tree is None else (tree, None))
    if counts.text:
        raise InputError(f"--no-first-stage-group column {column!r} is not binary: it holds "
                         f"text (e.g. {counts.least_text!r}); code the subgroup as 1 and every "
                         "other row as 0")
    if counts.others:
        raise InputError(f"--no-first-stage-group column {column!r} is not binary: it holds "
                         f"{counts.others} value(s) other than 0 and 1 (e.g. "
                         f"{counts.least_other:g}); code the subgroup as 1 and every other row "
                         "as 0")
    if not counts.ones:
        kept = " among the rows --where keeps" if spec.where is not None else ""
        raise InputError(f"--no-first-stage-group column {column!r} has no row equal to 1{kept}, "
                         "so the subgroup is empty; mark the subgroup's rows with 1")
    return counts


def check_role(spec, column: str) -> None:
    """InputError when the subgroup marker ``column`` already plays a role in ``spec``."""
    roles = {spec.outcome: "outcome", **{t: "treatment" for t in spec.treatments},
             **{z: "instrument" for z in spec.instruments},
             **{c: "cluster" for c in cluster_columns(spec)},
             spec.weight: "weight"}
    if column in roles:
        raise InputError(f"--no-first-stage-group column {column!r} is the {roles[column]}; "
                         "name a separate 0/1 column that marks the subgroup")


def _subgroup_source(data, spec, column: str, where: str) -> tuple[Any, list[str]]:
    """The subgroup's rows as a source on ``data``'s engine (its row filter and ``column ==
    1``, with a one-way absorbed fixed effect swept out), and the controls left out there: the
    marker and every text control with a single level in the subgroup's complete rows."""
    dropped = [c for c in spec.controls if c == column]
    while True:
        try:
            return absorb_source(reread(data, marked(spec, column, tuple(dropped)))), dropped
        except ConstantControlError as exc:
            if exc.column not in spec.controls or exc.column in dropped:
                raise InputError(f"in {where}: {exc}") from exc
            dropped.append(exc.column)
        except InputError as exc:
            raise InputError(f"in {where}: {exc}") from exc


def zero_first_stage(data, spec, column: str, *, se: str, confidence_level: float,
                     small: bool, scale: Scale, beta: np.ndarray,
                     counts: IndicatorCounts | None = None) -> ZeroFirstStage:
    r"""First stage and reduced form of the instruments within the subgroup ``column == 1``.

    .. math::

        \hat γ = \hat ρ_{\text{sub}}, \qquad \widehat{\mathrm{Var}}(\hat γ) =
        \widehat{\mathrm{Var}}(\hat ρ_{\text{sub}})

    with the chosen covariance (classic, robust or cluster) of the subgroup's regressions.
    Controls that are constant (or collinear) within the subgroup carry no information there
    and are dropped, with a note; the 2SLS of the subgroup is never formed (its premise is
    that the treatment is not identified there).

    Raises
    ------
    InputError
        Column not binary, empty or too small subgroup, or an instrument that does not vary
        within the subgroup.
    """
    check_role(spec, column)
    counts = counts if counts is not None else marker_counts(data, column, spec)
    where = f"the subgroup {column} == 1 ({counts.ones} rows)"
    source, dropped = _subgroup_source(data, spec, column, where)
    layout = source.layout
    moments = moments_of(source, layout.columns)
    k_z = len(layout.instruments)
    absorption = getattr(source, "absorption", None)
    k_fe = absorption.parameters(se) if absorption is not None else 0
    n_params = len(layout.controls) + k_z + int(layout.constant) + k_fe
    if moments.n <= n_params:
        raise InputError(
            f"{where} has only {moments.n} usable rows (after dropping {moments.n_dropped} "
            f"with missing values) for the {n_params} coefficients of its reduced form; the "
            "subgroup is too small to estimate: mark a larger subgroup or use fewer controls")
    gram = moments.augmented * (moments.n / moments.weight_sum)
    design, collinear = _subgroup_design(moments, layout, gram, where)
    dropped += collinear
    zt = partialled(design.z, design.w, gram)
    targets = np.column_stack([design.x, design.y])
    joint = _subgroup_covariance(source, spec, moments, design, gram, zt, targets, se=se,
                                 small=small, where=where, absorbed=k_fe)
    coef = linalg.scaled_cholesky(zt.T @ gram @ zt).solve(zt.T @ gram @ targets)
    k_x = len(layout.treatments)
    df2 = moments.n - design.instrument_set.shape[1] - k_fe if small else None
    fs_coef, fs_f, fs_p = _first_stage_tests(design, layout, gram, coef, joint, df2)
    direct = coef[:, k_x]
    cov = joint[k_x, :, k_x, :]
    cov = 0.5 * (cov + cov.T)
    se_direct = np.sqrt(np.maximum(np.diag(cov), 0.0))
    if not np.all(se_direct > 0):
        raise InputError(f"the outcome does not vary in {where} once the controls and "
                         "instruments are accounted for, so the direct effect has no standard "
                         "error there; choose another subgroup")
    upper = 0.5 + 0.5 * confidence_level
    critical = dist.t_quantile(upper, df2) if small else dist.normal_quantile(upper)
    intervals = tuple(Interval(float(d - critical * s), float(d + critical * s))
                      for d, s in zip(direct, se_direct))
    return ZeroFirstStage(
        group=column, n=moments.n, n_dropped=moments.n_dropped,
        n_marker_missing=counts.missing,
        instruments=layout.instruments, treatments=layout.treatments, se_type=se,
        confidence_level=confidence_level, critical=critical, first_stage=fs_coef,
        first_stage_f=fs_f, first_stage_p_value=fs_p, direct=direct, covariance=cov,
        direct_rf=tuple(scale.in_units(k, float(d), "rf") for k, d in enumerate(direct)),
        direct_sd=tuple(scale.in_units(k, float(d), "sd") for k, d in enumerate(direct)),
        contamination=tuple(map(float, coef[:, :k_x] @ beta)),
        controls_dropped=tuple(dict.fromkeys(dropped)), interval=intervals,
        interval_rf=tuple(Interval(*sorted((scale.in_units(k, i.low, "rf"),
                                            scale.in_units(k, i.high, "rf"))))
                          for k, i in enumerate(intervals)))


def _subgroup_design(moments: Moments, layout, gram: np.ndarray,
                     where: str) -> tuple[Design, list[str]]:
    """The subgroup's design with collinear controls dropped one at a time (and their names);
    InputError when an instrument itself is constant or collinear there."""
    controls = list(layout.controls)
    dropped = []
    while True:
        design = design_for(moments, layout, controls)
        found = linalg.first_dependent_column(
            design.instrument_set.T @ gram @ design.instrument_set)
        if found is None:
            return design, dropped
        j = found[0]
        n_w = len(design.control_names)
        if j >= n_w or design.control_names[j] == CONSTANT:
            name = design.instruments[j - n_w] if j >= n_w else CONSTANT
            raise InputError(
                f"instrument {name!r} is constant in {where} (or collinear with the controls "
                "there), so its reduced-form coefficient cannot be estimated in the subgroup; "
                "choose a subgroup in which the instrument varies")
        dropped.append(design.control_names[j])
        controls.remove(design.control_names[j])


def _subgroup_covariance(source, spec, moments: Moments, design: Design, gram: np.ndarray,
                         zt: np.ndarray, targets: np.ndarray, *, se: str, small: bool,
                         where: str, absorbed: int = 0) -> np.ndarray:
    """Joint covariance of the subgroup's first-stage and reduced-form coefficients (the
    second pass over the subgroup's rows for robust and cluster covariances)."""
    q = design.instrument_set
    q_chol = linalg.scaled_cholesky(q.T @ gram @ q)
    residuals = targets - q @ q_chol.solve(q.T @ gram @ targets)
    sums = None
    if se != "classic":
        sums = normalise_weights(
            scores_of(source, moments.mean, [ScoreBlock("first", zt, residuals)],
                       cluster=(se == "cluster")), moments)
        try:
            check_clusters(sums, spec.cluster)
        except InputError as exc:
            raise InputError(f"in {where}: {exc}") from exc
        sums = combine_two_way(sums, small)
    # Only the first-stage fields of Pieces are read by first_stage_covariance; the
    # subgroup's 2SLS (tsls, ols) is deliberately not formed.
    pieces = iv.Pieces(moments, design, gram, None, None, zt, residuals, absorbed)
    n_clusters = sums.n_clusters if sums is not None else None
    return first_stage_covariance(pieces, sums.meats["first"] if sums else None, se,
                                     small, n_clusters)


def _first_stage_tests(design: Design, layout, gram: np.ndarray, coef: np.ndarray,
                       joint: np.ndarray, df2: int | None
                       ) -> tuple[dict[str, dict[str, float]], dict[str, float],
                                  dict[str, float]]:
    """Per treatment: the subgroup's first-stage coefficients, F statistic and its p-value
    (``df2`` for the small-sample F, ``None`` for the chi-square)."""
    k_z = len(layout.instruments)
    fs_f, fs_p, fs_coef = {}, {}, {}
    x_left = partialled(design.x, design.w, gram)
    for j, t in enumerate(layout.treatments):
        fs_coef[t] = dict(zip(layout.instruments, map(float, coef[:, j])))
        total = float(design.x[:, j] @ gram @ design.x[:, j])
        left = float(x_left[:, j] @ gram @ x_left[:, j])
        if not left > linalg.COLLINEAR_SHARE * total:
            # The treatment does not vary within the subgroup (given the controls): its first
            # stage is zero by construction.
            fs_f[t], fs_p[t] = 0.0, 1.0
            continue
        f = linalg.wald_statistic(coef[:, j], joint[j, :, j, :]) / k_z
        fs_f[t] = f
        fs_p[t] = dist.f_sf(f, k_z, df2) if df2 is not None else dist.chi2_sf(f * k_z, k_z)
    return fs_coef, fs_f, fs_p
