r"""Calibrating how large a direct effect of the instrument is plausible.

A direct-effect range ``--direct LOW:HIGH`` is only as convincing as the reasons behind it.
This module offers three yardsticks, each computed from moments:

* **scale** — the reduced-form coefficient ``ρ_k`` of each instrument (controls partialled
  out), the outcome SD and each instrument's SD (weighted, divisor ``Σw``; the definitions of
  :class:`sensiv.sensitivity.bounds.Scale`), so that a direct effect ``γ_k`` reads as a share of the
  reduced form, ``γ_k / ρ_k``, or in SD units, ``γ_k · SD(z_k) / SD(y)``;
* **covariate benchmarks** — for each control (or named group of controls), the shift in the
  instruments' reduced-form coefficients when that control is left out,

  .. math::

      Δρ_g = ρ(\text{controls} \setminus g) - ρ(\text{controls}),

  i.e. the spurious "direct effect" that forgetting an *observed* confounder would have
  produced.  All benchmarks come from the same pass-1 moments: a reduced form without a
  control is just a different design on the same cross-products;
* **zero-first-stage estimate** (van Kippersluis & Rietveld 2018) — in a subgroup where the
  instrument is believed not to move the treatment, ``ρ = βπ + γ`` collapses to ``ρ = γ``,
  so the subgroup's reduced-form coefficient (with its standard error) estimates the direct
  effect; it is offered as a normal prior for ``sensiv prior`` and as a range for
  ``sensiv sweep``.

None of these is the true direct effect; they are reference magnitudes a reader can judge.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from sensiv.estimation import distributions as dist
from sensiv.estimation import iv, linalg
from sensiv.estimation.covariance import check_clusters, normalise_weights
from sensiv.estimation.design import CONSTANT, Design, build_design
from sensiv.estimation.first_stage import first_stage_covariance
from sensiv.sensitivity.bounds import Scale
from sensiv.core.errors import InputError
from sensiv.estimation.moments import Moments, ScoreBlock, accumulate, score_sums
from sensiv.core.results import Interval, describe, format_number, json_number

# Significant digits of the option strings offered for `sweep` and `prior`; range ends are
# rounded outwards so that the offered range contains the computed one.
OPTION_DIGITS = 4
CAUTION = ("Caution: these calibrations are reference magnitudes, not estimates of the true "
           "direct effect; sensitivity results hold only under the ranges or priors you adopt, "
           "and nothing here proves that an instrument is valid.")


# ============================================================================ helpers
def parse_group(text: str) -> tuple[str, tuple[str, ...]]:
    """Parse ``NAME=COL1,COL2`` (a named group of controls for a joint benchmark).

    Examples
    --------
    >>> parse_group("terrain=plot_ha,soil")
    ('terrain', ('plot_ha', 'soil'))
    """
    name, sep, columns = str(text).partition("=")
    name = name.strip()
    cols = tuple(dict.fromkeys(c.strip() for c in columns.split(",") if c.strip()))
    if not sep or not name or not cols:
        raise InputError(f"--group '{text}' is not NAME=COL1,COL2; write e.g. "
                         "--group terrain=plot_ha,soil (the columns must be controls)")
    return name, cols


def parse_groups(texts: Sequence[str]) -> dict[str, tuple[str, ...]]:
    """Parse several ``--group`` options; a repeated group name is an error."""
    out: dict[str, tuple[str, ...]] = {}
    for text in texts:
        name, cols = parse_group(text)
        if name in out:
            raise InputError(f"--group name '{name}' is given twice; give each group once "
                             "with all its columns")
        out[name] = cols
    return out


def _outward(value: float, up: bool, digits: int = OPTION_DIGITS) -> float:
    """``value`` rounded to ``digits`` significant digits, away from the range's inside."""
    if value == 0.0 or not math.isfinite(value):
        return value
    exponent = math.floor(math.log10(abs(value))) - digits + 1
    step = 10.0 ** exponent
    rounded = (math.ceil if up else math.floor)(value / step) * step
    return float(f"{rounded:.{digits}g}")


def _range_option(low: float, high: float) -> str:
    """``--direct=LOW:HIGH`` with the ends rounded outwards."""
    lo, hi = _outward(low, up=False), _outward(high, up=True)
    return f"--direct={lo:.{OPTION_DIGITS}g}:{hi:.{OPTION_DIGITS}g}"


def _partialled(maps: np.ndarray, w: np.ndarray, gram: np.ndarray) -> np.ndarray:
    """Row maps of ``maps`` with the columns of ``w`` partialled out."""
    if not w.shape[1]:
        return maps
    coef = linalg.scaled_cholesky(w.T @ gram @ w).solve(w.T @ gram @ maps)
    return maps - w @ coef


def instrument_coefficients(moments: Moments, design: Design) -> np.ndarray:
    r"""Coefficients of the instruments in the regressions of each treatment and of the outcome
    on ``[constant, controls, instruments]``, from moments only.

    .. math::

        [\hat π, \hat ρ] = (\tilde Z' \tilde Z)^{-1} \tilde Z' [X, y], \qquad
        \tilde Z = Z - W (W'W)^{-1} W'Z

    Returns
    -------
    ndarray, shape (k_z, k_x + 1)
        One column per treatment (first stages), the last column the reduced form.
    """
    gram = moments.augmented
    zt = _partialled(design.z, design.w, gram)
    targets = np.column_stack([design.x, design.y])
    return linalg.scaled_cholesky(zt.T @ gram @ zt).solve(zt.T @ gram @ targets)


def scale_from_moments(moments: Moments, outcome: str, instruments: Sequence[str],
                       reduced_form: np.ndarray) -> Scale:
    """The units of :class:`sensiv.sensitivity.bounds.Scale` (weighted SDs with divisor ``Σw``)."""
    return Scale(tuple(instruments), np.asarray(reduced_form, float),
                 math.sqrt(moments.variance(outcome)),
                 np.array([math.sqrt(moments.variance(z)) for z in instruments]))


def _design(moments: Moments, layout, controls: Sequence[str]) -> Design:
    return build_design(moments, layout.outcome, layout.treatments, layout.instruments,
                        controls, layout.constant)


# ============================================================================ benchmarks
@dataclass(frozen=True, slots=True)
class Benchmark:
    """The direct effect on one instrument implied by leaving out one control or group.

    ``implied_direct = ρ_without − ρ_with`` (outcome units).  Sign convention: positive means
    that ignoring the control would have *added* that much to the instrument's reduced-form
    coefficient.  Since ``ρ = βπ + γ``, an addition to ``ρ`` at a fixed first stage is
    indistinguishable from a direct effect ``γ`` of the same sign, so the value can be entered
    into ``--direct`` as it stands.  The reduced-form shift also carries any shift of the first
    stage (the path instrument → control → treatment → outcome, which is *not* an exclusion
    violation); ``implied_direct_net = Δρ − Δπ'β̂`` removes it, using the full-sample 2SLS
    ``β̂`` (which itself assumes the exclusion restriction).  The two agree when the control
    does not move the first stage.
    """

    name: str
    columns: tuple[str, ...]
    instrument: str
    implied_direct: float
    implied_direct_rf: float
    implied_direct_sd: float
    reduced_form_without: float
    first_stage_shift: dict[str, float]
    implied_direct_net: float

    @property
    def sweep_option(self) -> str:
        """A symmetric ``--direct`` range as large as the benchmark (either sign)."""
        size = abs(self.implied_direct)
        return _range_option(-size, size)

    def to_dict(self) -> dict:
        return {"name": self.name, "columns": list(self.columns),
                "instrument": self.instrument,
                "implied_direct": json_number(self.implied_direct),
                "implied_direct_rf": json_number(self.implied_direct_rf),
                "implied_direct_sd": json_number(self.implied_direct_sd),
                "reduced_form_without": json_number(self.reduced_form_without),
                "first_stage_shift": {k: json_number(v)
                                      for k, v in self.first_stage_shift.items()},
                "implied_direct_net": json_number(self.implied_direct_net),
                "sweep_direct": self.sweep_option}


def benchmark_groups(spec, layout, groups: Mapping[str, Sequence[str]] | None
                     ) -> list[tuple[str, tuple[str, ...], tuple[str, ...]]]:
    """``(name, raw columns, design columns)`` of every benchmark.

    Each control is one benchmark under its own name (a text control with all its indicator
    columns); each entry of ``groups`` adds a benchmark that leaves out all its columns.
    """
    indicators = dict(layout.categorical)

    def design_columns(name: str) -> tuple[str, ...]:
        if name in indicators:
            return tuple(f"{name}[{level}]" for level in indicators[name])
        return (name,)

    out = [(c, (c,), design_columns(c)) for c in spec.controls]
    for name, cols in (groups or {}).items():
        if not isinstance(name, str) or not name.strip():
            raise InputError(f"group name {name!r} must be a non-empty string")
        if isinstance(cols, str):
            cols = (cols,)
        cols = tuple(dict.fromkeys(cols))
        if not cols:
            raise InputError(f"group '{name}' names no columns; write --group {name}=COL1,COL2")
        if name in spec.controls:
            raise InputError(f"group name '{name}' is already the name of a control's own "
                             "benchmark; choose another group name")
        unknown = [c for c in cols if c not in spec.controls]
        if unknown:
            raise InputError(
                f"group '{name}' names column(s) {', '.join(map(repr, unknown))} that are not "
                f"controls (controls: {', '.join(spec.controls) or 'none'}); a benchmark "
                "leaves out a control, so add them with --control or remove them from the group")
        out.append((name, cols, tuple(d for c in cols for d in design_columns(c))))
    return out


def covariate_benchmarks(moments: Moments, layout, groups, full: np.ndarray,
                         beta: np.ndarray, scale: Scale) -> tuple[Benchmark, ...]:
    """Benchmarks for every group from one set of moments (no further pass over the rows).

    ``full`` is :func:`instrument_coefficients` with every control; ``beta`` the 2SLS
    coefficients of the treatments.
    """
    k_x = len(layout.treatments)
    out = []
    for name, raw, columns in groups:
        kept = [c for c in layout.controls if c not in columns]
        without = instrument_coefficients(moments, _design(moments, layout, kept))
        shift = without - full                                   # (k_z, k_x + 1)
        for k, z in enumerate(layout.instruments):
            implied = float(shift[k, k_x])
            out.append(Benchmark(
                name=name, columns=raw, instrument=z, implied_direct=implied,
                implied_direct_rf=scale.in_units(k, implied, "rf"),
                implied_direct_sd=scale.in_units(k, implied, "sd"),
                reduced_form_without=float(without[k, k_x]),
                first_stage_shift=dict(zip(layout.treatments, map(float, shift[k, :k_x]))),
                implied_direct_net=implied - float(shift[k, :k_x] @ beta)))
    return tuple(out)


# ============================================================================ zero first stage
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
        thumb (:data:`sensiv.estimation.iv.WEAK_F`): the instrument seems to move the treatment there."""
        return any(f >= iv.WEAK_F for f in self.first_stage_f.values())

    @property
    def prior_options(self) -> tuple[str, ...]:
        """One ``normal:MEAN:SD`` law per instrument (the SD rounded up)."""
        return tuple(f"normal:{d:.{OPTION_DIGITS}g}:{_outward(s, up=True):.{OPTION_DIGITS}g}"
                     for d, s in zip(self.direct, self.se))

    @property
    def sweep_options(self) -> tuple[str, ...]:
        """One ``--direct`` range per instrument: estimate ± critical value × SE."""
        return tuple(_range_option(d - self.critical * s, d + self.critical * s)
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


def _is_text(series) -> bool:
    import pandas as pd

    api = pd.api.types
    return not (api.is_bool_dtype(series.dtype) or api.is_numeric_dtype(series.dtype))


def subgroup_mask(frame, column: str) -> tuple[np.ndarray, int]:
    """Rows with ``column == 1`` and the count of rows where ``column`` is missing.

    Raises
    ------
    InputError
        The column is absent, not numeric or boolean, or takes values other than 0 and 1, or
        no row has the value 1.
    """
    import pandas as pd

    if column not in frame.columns:
        close = [str(c) for c in frame.columns if str(c).lower() == column.lower()]
        hint = f"; did you mean {close[0]!r}?" if close else ""
        raise InputError(f"--no-first-stage-group column {column!r} not found in the data"
                         f"{hint}; name a 0/1 column that marks the subgroup")
    series = frame[column]
    missing = series.isna().to_numpy()
    if _is_text(series):
        example = series[~series.isna()].iloc[0] if (~missing).any() else None
        raise InputError(f"--no-first-stage-group column {column!r} is not binary: it holds "
                         f"text (e.g. {example!r}); code the subgroup as 1 and every other "
                         "row as 0")
    values = pd.to_numeric(series[~missing]).to_numpy(dtype=float)
    bad = values[(values != 0.0) & (values != 1.0)]
    if bad.size:
        raise InputError(f"--no-first-stage-group column {column!r} is not binary: it holds "
                         f"{bad.size} value(s) other than 0 and 1 (e.g. {bad[0]:g}); code the "
                         "subgroup as 1 and every other row as 0")
    mask = np.zeros(len(frame), dtype=bool)
    mask[~missing] = values == 1.0
    if not mask.any():
        raise InputError(f"--no-first-stage-group column {column!r} has no row equal to 1, so "
                         "the subgroup is empty; mark the subgroup's rows with 1")
    return mask, int(missing.sum())


def _check_role(spec, column: str) -> None:
    roles = {spec.outcome: "outcome", **{t: "treatment" for t in spec.treatments},
             **{z: "instrument" for z in spec.instruments}, spec.cluster: "cluster",
             spec.weight: "weight"}
    if column in roles:
        raise InputError(f"--no-first-stage-group column {column!r} is the {roles[column]}; "
                         "name a separate 0/1 column that marks the subgroup")


def _single_level_controls(sub, spec) -> list[str]:
    """Text controls with fewer than two levels among the subgroup's complete rows."""
    used = [spec.outcome, *spec.treatments, *spec.instruments, *spec.controls,
            *(c for c in (spec.cluster, spec.weight) if c is not None)]
    block = sub[used]
    keep = block.notna().all(axis=1).to_numpy().copy()
    for name in used:
        if _is_text(block[name]):
            keep &= (block[name].astype(str) != "").to_numpy()
    return [c for c in spec.controls
            if _is_text(block[c]) and block.loc[keep, c].astype(str).nunique() < 2]


def zero_first_stage(frame, spec, column: str, *, se: str, confidence_level: float,
                     small: bool, scale: Scale, beta: np.ndarray) -> ZeroFirstStage:
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
    import dataclasses

    from sensiv.data import from_frame

    _check_role(spec, column)
    mask, n_missing = subgroup_mask(frame, column)
    sub = frame.loc[mask]
    where = f"the subgroup {column} == 1 ({int(mask.sum())} rows)"
    dropped = [c for c in spec.controls if c == column]
    dropped += _single_level_controls(sub, spec)
    sub_spec = dataclasses.replace(spec, controls=tuple(c for c in spec.controls
                                                        if c not in dropped))
    try:
        source = from_frame(sub, sub_spec)
    except InputError as exc:
        raise InputError(f"in {where}: {exc}") from exc
    layout = source.layout
    moments = accumulate(source.chunks(), layout.columns)
    controls = list(layout.controls)
    k_z = len(layout.instruments)
    n_params = len(controls) + k_z + int(layout.constant)
    if moments.n <= n_params:
        raise InputError(
            f"{where} has only {moments.n} usable rows (after dropping {moments.n_dropped} "
            f"with missing values) for the {n_params} coefficients of its reduced form; the "
            "subgroup is too small to estimate: mark a larger subgroup or use fewer controls")
    gram = moments.augmented * (moments.n / moments.weight_sum)
    while True:
        design = _design(moments, layout, controls)
        found = linalg.first_dependent_column(
            design.instrument_set.T @ gram @ design.instrument_set)
        if found is None:
            break
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
    zt = _partialled(design.z, design.w, gram)
    q = design.instrument_set
    targets = np.column_stack([design.x, design.y])
    q_chol = linalg.scaled_cholesky(q.T @ gram @ q)
    residuals = targets - q @ q_chol.solve(q.T @ gram @ targets)
    sums = None
    if se != "classic":
        sums = normalise_weights(
            score_sums(source.chunks(), moments.mean, [ScoreBlock("first", zt, residuals)],
                       cluster=(se == "cluster")), moments)
        try:
            check_clusters(sums, spec.cluster)
        except InputError as exc:
            raise InputError(f"in {where}: {exc}") from exc
    # Only the first-stage fields of Pieces are read by first_stage_covariance; the
    # subgroup's 2SLS (tsls, ols) is deliberately not formed.
    pieces = iv.Pieces(moments, design, gram, None, None, zt, residuals)
    n_clusters = sums.n_clusters if sums is not None else None
    joint = first_stage_covariance(pieces, sums.meats["first"] if sums else None, se,
                                   small, n_clusters)
    coef = linalg.scaled_cholesky(zt.T @ gram @ zt).solve(zt.T @ gram @ targets)
    k_x = len(layout.treatments)
    df2 = moments.n - q.shape[1] if small else None
    fs_f, fs_p, fs_coef = {}, {}, {}
    x_left = _partialled(design.x, design.w, gram)
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
        fs_p[t] = dist.f_sf(f, k_z, df2) if small else dist.chi2_sf(f * k_z, k_z)
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
        group=column, n=moments.n, n_dropped=moments.n_dropped, n_marker_missing=n_missing,
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


# ============================================================================ the result
@dataclass(frozen=True, slots=True)
class Calibration:
    """Reference magnitudes for direct effects: scale, covariate benchmarks, zero first stage."""

    outcome: str
    treatments: tuple[str, ...]
    instruments: tuple[str, ...]
    controls: tuple[str, ...]
    n: int
    n_dropped: int
    confidence_level: float
    scale: Scale
    estimate: dict[str, float]
    benchmarks: tuple[Benchmark, ...]
    zero_first_stage: ZeroFirstStage | None
    notes: tuple[str, ...] = field(default=())

    def assumptions(self) -> list[str]:
        out = [
            "linear model with constant coefficients: the outcome's dependence on the "
            "instruments is summarised by their reduced-form coefficients (controls "
            "partialled out)",
            "covariate benchmarks (Δρ = reduced form without the control minus with it) treat "
            "an unobserved violation as comparable in size to the confounding that an "
            "observed control removes; that comparison is a judgement, not a test",
            "implied_direct_net subtracts the first-stage shift times the full-sample 2SLS "
            "estimate, which itself assumes the exclusion restriction",
        ]
        if self.zero_first_stage is not None:
            g = self.zero_first_stage.group
            out += [
                f"zero first stage: in the subgroup {g} == 1 the instruments do not move the "
                "treatment (checked only through the subgroup's first-stage F)",
                f"the direct effect is the same in the subgroup {g} == 1 as in the whole "
                "sample, and the instruments are as good as randomly assigned given the "
                "controls within the subgroup",
                f"{self.zero_first_stage.se_type} covariance for the subgroup's reduced form",
            ]
        return out

    def suggestions(self) -> list[dict]:
        """Option strings for ``sweep`` and ``prior`` derived from each yardstick."""
        out = []
        for name in dict.fromkeys(b.name for b in self.benchmarks):
            rows = [b for b in self.benchmarks if b.name == name]
            out.append({"source": f"covariate benchmark '{name}'", "command": "sweep",
                        "options": " ".join(b.sweep_option for b in rows)})
        if len({b.name for b in self.benchmarks}) > 1:
            largest = [max((b for b in self.benchmarks if b.instrument == z),
                           key=lambda b: abs(b.implied_direct)) for z in self.instruments]
            out.append({"source": "largest covariate benchmark per instrument ("
                        + ", ".join(f"{b.instrument}: {b.name}" for b in largest) + ")",
                        "command": "sweep",
                        "options": " ".join(b.sweep_option for b in largest)})
        z = self.zero_first_stage
        if z is not None:
            source = f"zero first stage in {z.group} == 1"
            out.append({"source": source, "command": "prior",
                        "options": " ".join(f"--prior {p}" for p in z.prior_options)})
            out.append({"source": source, "command": "sweep",
                        "options": " ".join(z.sweep_options)})
        return out

    def to_dict(self) -> dict:
        s = self.scale
        return {
            "outcome": self.outcome, "treatments": list(self.treatments),
            "instruments": list(self.instruments), "controls": list(self.controls),
            "n": self.n, "n_dropped": self.n_dropped,
            "confidence_level": self.confidence_level,
            "scale": {"reduced_form": dict(zip(s.instruments, map(float, s.reduced_form))),
                      "outcome_sd": s.outcome_sd,
                      "instrument_sd": dict(zip(s.instruments, map(float, s.instrument_sd)))},
            "estimate": {k: json_number(v) for k, v in self.estimate.items()},
            "covariate_benchmarks": [b.to_dict() for b in self.benchmarks],
            "zero_first_stage": (self.zero_first_stage.to_dict()
                                 if self.zero_first_stage is not None else None),
            "suggestions": self.suggestions(),
            "notes": list(self.notes),
            "assumptions": self.assumptions(),
            "caution": CAUTION,
        }

    def __str__(self) -> str:
        return describe(self)


# ============================================================================ entry point
def calibrate(data, spec=None, *, groups: Mapping[str, Sequence[str]] | None = None,
              no_first_stage_group: str | None = None, se: iv.SEType | None = None,
              confidence_level: float = 0.95, small: bool = False,
              chunk_rows: int | None = None) -> Calibration:
    """Scale, covariate benchmarks and (optionally) a zero-first-stage direct-effect estimate.

    Parameters
    ----------
    data : sensiv.data source, pandas.DataFrame or path
        With ``no_first_stage_group`` a DataFrame or a path (the subgroup's rows are selected
        from the frame, so a prepared source does not suffice).
    spec : sensiv.data.Spec, optional
        Required unless ``data`` is a source.
    groups : mapping of str to sequence of str, optional
        Extra benchmarks: group name → controls left out together.
    no_first_stage_group : str, optional
        A 0/1 column; rows with 1 form the subgroup where the instruments are believed not to
        move the treatment.
    se, confidence_level, small
        Covariance, level and small-sample corrections of the subgroup's reduced form.

    Returns
    -------
    Calibration

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> from sensiv.data import Spec
    >>> rng = np.random.default_rng(0)
    >>> n = 5000
    >>> w = rng.normal(size=n); z = 0.5 * w + rng.normal(size=n)
    >>> x = z + rng.normal(size=n); y = x + 2.0 * w + rng.normal(size=n)
    >>> frame = pd.DataFrame({"y": y, "x": x, "z": z, "w": w})
    >>> cal = calibrate(frame, Spec("y", ["x"], ["z"], controls=["w"]))
    >>> b = cal.benchmarks[0]  # population value: 2 · cov(w, z) / var(z) = 2 · 0.5 / 1.25 = 0.8
    >>> b.name, round(b.implied_direct, 3)
    ('w', 0.784)
    """
    from sensiv.data import read_table

    if no_first_stage_group is not None:
        import pandas as pd

        if not isinstance(no_first_stage_group, str) or not no_first_stage_group:
            raise InputError(f"--no-first-stage-group must name a column; got "
                             f"{no_first_stage_group!r}")
        if hasattr(data, "chunks"):
            raise InputError("a zero-first-stage subgroup is selected from the rows of a "
                             "DataFrame or file; pass the DataFrame or the path instead of a "
                             "prepared source")
        frame = data if isinstance(data, pd.DataFrame) else read_table(data)
        source = iv.as_source(frame, spec)
    else:
        frame = None
        source = iv.as_source(data, spec, chunk_rows=chunk_rows)
    spec = source.spec
    layout = source.layout
    se = se or iv.default_se(spec)
    iv.check_options(se, spec.cluster, confidence_level)
    named = benchmark_groups(spec, layout, groups)
    if frame is not None:  # column checks before any estimation
        _check_role(spec, no_first_stage_group)
        subgroup_mask(frame, no_first_stage_group)

    moments = accumulate(source.chunks(), layout.columns)
    pieces = iv.prepare(moments, layout)  # validates the design; gives the 2SLS estimate
    k_x = len(layout.treatments)
    beta = (pieces.design.transform @ pieces.tsls.params)[-k_x:]
    full = instrument_coefficients(moments, pieces.design)
    scale = scale_from_moments(moments, layout.outcome, layout.instruments, full[:, k_x])
    benchmarks = covariate_benchmarks(moments, layout, named, full, beta, scale)
    notes = []
    if not named:
        notes.append("no controls, so no covariate benchmarks: add --control (or --group) to "
                     "compare the direct effect with an observed confounder")
    zfs = None
    if frame is not None:
        zfs = zero_first_stage(frame, spec, no_first_stage_group, se=se,
                               confidence_level=confidence_level, small=small, scale=scale,
                               beta=beta)
        if zfs.n_marker_missing:
            notes.append(f"{zfs.n_marker_missing} row(s) have no value of {zfs.group}; they "
                         "are outside the subgroup")
        if zfs.controls_dropped:
            notes.append(f"in the subgroup {zfs.group} == 1 the control(s) "
                         f"{', '.join(zfs.controls_dropped)} do not vary (given the others) "
                         "and were left out of its regressions")
        if zfs.premise_doubtful:
            listed = ", ".join(f"{t}: {format_number(f, 4)}" for t, f in
                               zfs.first_stage_f.items())
            message = (f"the first-stage F in the subgroup {zfs.group} == 1 is {listed} "
                       f"(≥ {iv.WEAK_F:g}): the instruments seem to move the treatment there, "
                       "so the premise of the zero-first-stage estimate looks false and its "
                       "'direct effect' mixes in the treatment's effect")
            notes.append(message)
            warnings.warn(message, UserWarning, stacklevel=2)
        elif any(p < 1.0 - confidence_level for p in zfs.first_stage_p_value.values()):
            notes.append(
                f"the first stage in the subgroup {zfs.group} == 1 is weak but detectably "
                "non-zero; the direct-effect estimate then carries the treatment's effect "
                "times that first stage (see 'contamination')")
    return Calibration(
        outcome=layout.outcome, treatments=layout.treatments, instruments=layout.instruments,
        controls=spec.controls, n=moments.n, n_dropped=moments.n_dropped,
        confidence_level=confidence_level, scale=scale,
        estimate=dict(zip(layout.treatments, map(float, beta))), benchmarks=benchmarks,
        zero_first_stage=zfs, notes=tuple(notes))


# ============================================================================ text and tables
def _text_table(header: list[str], rows: list[list[str]]) -> list[str]:
    widths = [max(len(r[j]) for r in [header, *rows]) for j in range(len(header))]

    def line(cells: list[str]) -> str:
        return "  " + "  ".join(c.ljust(w) if j < 2 else c.rjust(w)
                                for j, (c, w) in enumerate(zip(cells, widths)))
    return [line(header), "  " + "-" * (sum(widths) + 2 * (len(widths) - 1))] + [
        line(r) for r in rows]


def _g(value: float) -> str:
    return format_number(value, 4)


def _rows(cal: Calibration) -> list[list[str]]:
    return [[b.name, b.instrument, _g(b.implied_direct), _g(b.implied_direct_rf),
             _g(b.implied_direct_sd), _g(b.implied_direct_net), b.sweep_option]
            for b in cal.benchmarks]


BENCHMARK_HEADER = ["left out", "instrument", "implied direct", "share of RF", "SD units",
                    "net of first stage", "sweep range"]


def _zfs_lines(z: ZeroFirstStage, bullet: str) -> list[str]:
    pct = f"{100 * z.confidence_level:g}%"
    lines = [f"Zero-first-stage estimate (van Kippersluis & Rietveld 2018) in the subgroup "
             f"{z.group} == 1 (n = {z.n}, covariance: {z.se_type})"]
    for t in z.treatments:
        lines.append(f"{bullet}first stage of {t} there: F = {_g(z.first_stage_f[t])} "
                     f"(p = {format_number(z.first_stage_p_value[t], 3)})"
                     + ("  <- not weak: the premise looks false" if
                        z.first_stage_f[t] >= iv.WEAK_F else ""))
    for k, name in enumerate(z.instruments):
        lines.append(
            f"{bullet}direct effect of {name}: {_g(z.direct[k])} (se {_g(z.se[k])}); share of "
            f"RF {_g(z.direct_rf[k])}; SD units {_g(z.direct_sd[k])}; contamination if the "
            f"first stage there is not zero: {_g(z.contamination[k])}")
    lines.append(f"{bullet}as a prior: " + " ".join(f"--prior {p}" for p in z.prior_options))
    lines.append(f"{bullet}as a {pct} range: " + " ".join(z.sweep_options))
    return lines


def calibration_text(cal: Calibration) -> str:
    """Plain-text summary (formatting only)."""
    s = cal.scale
    lines = [
        f"Calibration of direct effects on {cal.outcome} "
        f"(treatment: {', '.join(cal.treatments)}; instruments: {', '.join(cal.instruments)}; "
        f"n = {cal.n}, dropped {cal.n_dropped} with missing values)",
        "",
        "Scale: a direct effect d of instrument z reads as d / RF (share of the reduced form) "
        "or d * SD(z) / SD(y) (SD units)",
    ]
    lines += _text_table(["instrument", "reduced form", "instrument SD"],
                    [[z, _g(r), _g(sd)] for z, r, sd in
                     zip(s.instruments, s.reduced_form, s.instrument_sd)])
    lines.append(f"outcome SD: {_g(s.outcome_sd)}")
    lines += ["", "Covariate benchmarks: direct effect implied by leaving a control out "
                  "(RF without it minus RF with it)"]
    if cal.benchmarks:
        lines += _text_table(BENCHMARK_HEADER, _rows(cal))
    else:
        lines.append("  none (no controls)")
    if cal.zero_first_stage is not None:
        lines += [""] + _zfs_lines(cal.zero_first_stage, "  ")
    lines += ["", "Suggestions:"]
    lines += [f"  {s['command']} {s['options']}   # {s['source']}" for s in cal.suggestions()]
    for note in cal.notes:
        lines += ["", "Warning: " + note]
    lines += ["", "Assumptions:"] + [f"  - {a}" for a in cal.assumptions()]
    lines += ["", CAUTION]
    return "\n".join(lines)


def calibration_markdown(cal: Calibration) -> str:
    """Markdown report (formatting only)."""
    from sensiv.present.tables import markdown_table

    s = cal.scale
    parts = [
        f"# Calibration of direct effects on {cal.outcome}\n\n",
        f"Treatment: {', '.join(cal.treatments)}. Instruments: {', '.join(cal.instruments)}. "
        f"Controls: {', '.join(cal.controls) or 'none'}. n = {cal.n}.\n\n",
        "## Scale\n\nA direct effect d of instrument z reads as d / RF (share of the reduced "
        "form) or d · SD(z) / SD(y) (SD units).\n\n",
        markdown_table(["instrument", "reduced form", "instrument SD"],
                       [[z, _g(r), _g(sd)] for z, r, sd in
                        zip(s.instruments, s.reduced_form, s.instrument_sd)]),
        f"\nOutcome SD: {_g(s.outcome_sd)}.\n\n## Covariate benchmarks\n\n",
        (markdown_table(BENCHMARK_HEADER, _rows(cal)) if cal.benchmarks else "None.\n"),
    ]
    if cal.zero_first_stage is not None:
        z_lines = _zfs_lines(cal.zero_first_stage, "- ")
        parts.append("\n## " + z_lines[0] + "\n\n" + "\n".join(z_lines[1:]) + "\n")
    parts.append("\n## Suggestions\n\n" + "\n".join(
        f"- `{s['command']} {s['options']}` ({s['source']})" for s in cal.suggestions()) + "\n")
    for note in cal.notes:
        parts.append(f"\n**Warning:** {note}\n")
    parts.append("\n## Assumptions\n\n" + "\n".join(f"- {a}" for a in cal.assumptions())
                 + "\n")
    parts.append(f"\n> {CAUTION}\n")
    return "".join(parts)
