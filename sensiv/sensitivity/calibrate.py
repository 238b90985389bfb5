r"""Calibrating how large a direct effect of the instrument is plausible.

A direct-effect range ``--direct LOW:HIGH`` is only as convincing as the reasons behind it.
This module offers three yardsticks, each computed from moments:

* **scale** — the reduced-form coefficient ``ρ_k`` of each instrument (controls partialled
  out), the outcome SD and each instrument's SD (weighted, divisor ``Σw``; the definitions of
  :class:`sensiv.sensitivity.direct_sets.Scale`), so that a direct effect ``γ_k`` reads as a
  share of the reduced form, ``γ_k / ρ_k``, or in SD units, ``γ_k · SD(z_k) / SD(y)``;
* **leave-one-out yardsticks** — for each control (or named group of controls), the shift in the
  instruments' reduced-form coefficients when that control is left out,

  .. math::

      Δρ_g = ρ(\text{controls} \setminus g) - ρ(\text{controls}),

  i.e. the spurious "direct effect" that forgetting an *observed* confounder would have
  produced.  All yardsticks come from the same pass-1 moments: a reduced form without a
  control is just a different design on the same cross-products;
* **zero-first-stage estimate** (van Kippersluis & Rietveld 2018) — in a subgroup where the
  instrument is believed not to move the treatment, ``ρ = βπ + γ`` collapses to ``ρ = γ``,
  so the subgroup's reduced-form coefficient (with its standard error) estimates the direct
  effect; it is offered as a normal prior for ``sensiv prior`` and as a range for
  ``sensiv sweep``.

None of these is the true direct effect; they are reference magnitudes a reader can judge.
The yardsticks live in :mod:`sensiv.sensitivity.yardsticks`, the zero-first-stage estimate in
:mod:`sensiv.sensitivity.zero_first_stage`; this module parses the options, runs them on one
set of moments and holds the :class:`Calibration` result.
"""

from __future__ import annotations

import os
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

from sensiv.core.errors import FewClustersWarning, InputError
from sensiv.core.results import Presentable, describe, format_number, json_number
from sensiv.data import from_file, read_table
from sensiv.data.datasets import from_dask, is_dask_frame, is_dataset
from sensiv.data.where import filter_assumptions
from sensiv.estimation import iv
from sensiv.estimation.absorb import Absorption
from sensiv.estimation.covariance import count_notes
from sensiv.estimation.label_codes import count_clusters
from sensiv.estimation.passes import moments_of
from sensiv.sensitivity.yardsticks import (Yardstick, yardstick_groups, leave_one_out_yardsticks,
                                           instrument_coefficients)
from sensiv.sensitivity.direct_sets import Scale, scale_from_moments
from sensiv.sensitivity.zero_first_stage import (ZeroFirstStage, check_role, marker_counts,
                                                 zero_first_stage)

CAUTION = ("Caution: these calibrations are reference magnitudes, not estimates of the true "
           "direct effect; sensitivity results hold only under the ranges or priors you adopt, "
           "and nothing here proves that an instrument is valid.")


# ============================================================================ options
def parse_group(text: str) -> tuple[str, tuple[str, ...]]:
    """Parse ``NAME=COL1,COL2`` (a named group of controls for a joint yardstick).

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


# ============================================================================ the result
@dataclass(frozen=True, slots=True)
class Calibration(Presentable):
    """Reference magnitudes for direct effects: scale, leave-one-out yardsticks, zero first stage."""

    outcome: str
    treatments: tuple[str, ...]
    instruments: tuple[str, ...]
    controls: tuple[str, ...]
    n: int
    n_dropped: int
    confidence_level: float
    scale: Scale
    estimate: dict[str, float]
    yardsticks: tuple[Yardstick, ...]
    zero_first_stage: ZeroFirstStage | None
    notes: tuple[str, ...] = field(default=())
    n_filtered: int = 0
    where: str | None = None
    absorption: Absorption | None = None

    def assumptions(self) -> list[str]:
        out = [
            "linear model with constant coefficients: the outcome's dependence on the "
            "instruments is summarised by their reduced-form coefficients (controls "
            "partialled out)",
            "leave-one-out yardsticks (Δρ = reduced form without the control minus with it) treat "
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
        return out + filter_assumptions(self.where, self.n_filtered) + (
            self.absorption.assumptions() if self.absorption is not None else [])

    def suggestions(self) -> list[dict]:
        """Option strings for ``sweep`` and ``prior`` derived from each yardstick."""
        out = []
        for name in dict.fromkeys(b.name for b in self.yardsticks):
            rows = [b for b in self.yardsticks if b.name == name]
            out.append({"source": f"leave-one-out yardstick '{name}'", "command": "sweep",
                        "options": " ".join(b.sweep_option for b in rows)})
        if len({b.name for b in self.yardsticks}) > 1:
            largest = [max((b for b in self.yardsticks if b.instrument == z),
                           key=lambda b: abs(b.implied_direct)) for z in self.instruments]
            out.append({"source": "largest leave-one-out yardstick per instrument ("
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
            "n": self.n, "n_dropped": self.n_dropped, "n_filtered": self.n_filtered,
            "where": self.where,
            "confidence_level": self.confidence_level,
            "scale": {"reduced_form": dict(zip(s.instruments, map(float, s.reduced_form))),
                      "outcome_sd": s.outcome_sd,
                      "instrument_sd": dict(zip(s.instruments, map(float, s.instrument_sd)))},
            "estimate": {k: json_number(v) for k, v in self.estimate.items()},
            "yardsticks": [b.to_dict() for b in self.yardsticks],
            "zero_first_stage": (self.zero_first_stage.to_dict()
                                 if self.zero_first_stage is not None else None),
            "suggestions": self.suggestions(),
            "notes": list(self.notes),
            "assumptions": self.assumptions(),
            "caution": CAUTION,
        } | (self.absorption.to_dict() if self.absorption is not None else {})

    def __str__(self) -> str:
        return describe(self)


# ============================================================================ entry point
def _calibration_notes(source, se: str, named) -> list[str]:
    """The data notes, a few-clusters warning per cluster variable, and the no-controls note."""
    notes = list(getattr(source, "notes", ()))
    if se == "cluster":  # the zero-first-stage covariance is clustered
        for note in count_notes(count_clusters(source.chunks()), source.spec.cluster):
            notes.append(note)
            warnings.warn(note, FewClustersWarning, stacklevel=3)
    if not named:
        notes.append("no controls, so no leave-one-out yardsticks: add --control (or --group) to "
                     "compare the direct effect with an observed confounder")
    return notes


def calibrate(data, spec=None, *, groups: Mapping[str, Sequence[str]] | None = None,
              no_first_stage_group: str | None = None, se: iv.SEType | None = None,
              confidence_level: float = 0.95, small: bool = False,
              chunk_rows: int | None = None) -> Calibration:
    """Scale, leave-one-out yardsticks and (optionally) a zero-first-stage direct-effect estimate.

    Parameters
    ----------
    data : sensiv.data source, pandas.DataFrame or path
        With ``no_first_stage_group`` a DataFrame, a path, a Dask DataFrame or a source read
        from files or a DuckDB table (the subgroup's rows are selected again where they live,
        so an in-memory source does not suffice).
    spec : sensiv.data.Spec, optional
        Required unless ``data`` is a source.
    groups : mapping of str to sequence of str, optional
        Extra yardsticks: group name → controls left out together.
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
    >>> b = cal.yardsticks[0]  # population value: 2 · cov(w, z) / var(z) = 2 · 0.5 / 1.25 = 0.8
    >>> b.name, round(b.implied_direct, 3)
    ('w', 0.784)
    """
    rows, source = _source(data, spec, no_first_stage_group, chunk_rows)
    spec = source.spec
    layout = source.layout
    se = se or iv.default_se(spec)
    iv.check_options(se, spec.cluster, confidence_level)
    named = yardstick_groups(spec, layout, groups)
    counts = None
    if rows is not None:  # column checks before any estimation
        check_role(spec, no_first_stage_group)
        counts = marker_counts(rows, no_first_stage_group, spec)

    moments = moments_of(source, layout.columns)
    absorption = getattr(source, "absorption", None)
    pieces = iv.prepare(moments, layout)  # validates the design; gives the 2SLS estimate
    k_x = len(layout.treatments)
    beta = (pieces.design.transform @ pieces.tsls.params)[-k_x:]
    full = instrument_coefficients(moments, pieces.design)
    scale = scale_from_moments(moments, layout.outcome, layout.instruments, full[:, k_x])
    yardsticks = leave_one_out_yardsticks(moments, layout, named, full, beta, scale)
    notes = _calibration_notes(source, se, named)
    zfs = None
    if rows is not None:
        zfs = zero_first_stage(rows, spec, no_first_stage_group, se=se,
                               confidence_level=confidence_level, small=small, scale=scale,
                               beta=beta, counts=counts)
        zfs_notes, warning = zero_first_stage_notes(zfs, confidence_level)
        notes += zfs_notes
        if warning is not None:
            warnings.warn(warning, UserWarning, stacklevel=2)
    return Calibration(
        outcome=layout.outcome, treatments=layout.treatments, instruments=layout.instruments,
        controls=spec.controls, n=moments.n, n_dropped=moments.n_dropped,
        confidence_level=confidence_level, scale=scale,
        estimate=dict(zip(layout.treatments, map(float, beta))), yardsticks=yardsticks,
        zero_first_stage=zfs, notes=tuple(notes), n_filtered=moments.n_filtered,
        where=spec.where, absorption=absorption)


def _source(data, spec, no_first_stage_group: str | None, chunk_rows: int | None):
    """``(rows, source)``: with a subgroup ``rows`` is where its rows are selected from (a
    DataFrame, read from a path if need be, or a source that can read its files, DuckDB table
    or Dask DataFrame again on its engine); otherwise ``rows`` is ``None`` and any source will
    do."""
    if no_first_stage_group is None:
        return None, iv.as_source(data, spec, chunk_rows=chunk_rows)
    import pandas as pd

    if not isinstance(no_first_stage_group, str) or not no_first_stage_group:
        raise InputError(f"--no-first-stage-group must name a column; got "
                         f"{no_first_stage_group!r}")
    if is_dask_frame(data):
        data = from_dask(data, spec)
    elif isinstance(data, (str, os.PathLike)) and is_dataset(data):
        data = from_file(data, spec, **({"chunk_rows": chunk_rows} if chunk_rows else {}))
    if hasattr(data, "chunks"):
        if data.origin is None:
            raise InputError("a zero-first-stage subgroup is selected from the rows of a "
                             "DataFrame, files or a DuckDB table; pass the DataFrame or the "
                             "path instead of a prepared source")
        return data, iv.as_source(data)
    frame = data if isinstance(data, pd.DataFrame) else read_table(data)
    return frame, iv.as_source(frame, spec)


def zero_first_stage_notes(zfs: ZeroFirstStage, confidence_level: float
                           ) -> tuple[list[str], str | None]:
    """Notes on the subgroup (missing markers, dropped controls, the premise check) and the
    message to warn with when the premise looks false (else ``None``)."""
    notes, warning = [], None
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
        warning = (f"the first-stage F in the subgroup {zfs.group} == 1 is {listed} "
                   f"(≥ {iv.WEAK_F:g}): the instruments seem to move the treatment there, "
                   "so the premise of the zero-first-stage estimate looks false and its "
                   "'direct effect' mixes in the treatment's effect")
        notes.append(warning)
    elif any(p < 1.0 - confidence_level for p in zfs.first_stage_p_value.values()):
        notes.append(
            f"the first stage in the subgroup {zfs.group} == 1 is weak but detectably "
            "non-zero; the direct-effect estimate then carries the treatment's effect "
            "times that first stage (see 'contamination')")
    return notes, warning
