r"""Correlation-restriction bounds for an imperfect instrument (Nevo & Rosen 2012).

Model: ``y = X β + W κ + u`` with one endogenous treatment ``X``, instruments ``Z₁ … Z_K`` and
exogenous controls ``W`` (with a constant unless switched off).  All correlations below are
of the variables after partialling out ``W`` (the conditional, linear-projection version of
the assumption).  The exclusion restriction ``corr(Z_k, u) = 0`` is replaced by

* **same sign**: ``corr(Z_k, u)`` has the sign of ``corr(X, u)`` (each instrument is less
  endogenous than the treatment, in the same direction);
* **bounded ratio**: ``|corr(Z_k, u)| ≤ r̄ · |corr(X, u)|`` with ``0 ≤ r̄ ≤ 1``; ``r̄ = 0`` is
  the exclusion restriction;
* optionally a known sign ``s`` of ``corr(X, u)`` (``endogeneity``).

In standardised units (``ρ``: partial correlations, ``b = β σ_X / σ_y``) the residual
covariances are ``cov(X, u) ∝ ρ_xy − b`` and ``cov(Z_k, u) ∝ ρ_{z_k y} − b ρ_{z_k x}``, so
for a fixed sign ``s`` every condition is linear in ``b``:

.. math::

    s(ρ_{xy} − b) ≥ 0,\qquad 0 ≤ s(ρ_{z_k y} − b ρ_{z_k x}) ≤ \bar r\, s(ρ_{xy} − b).

The identified set for sign ``s`` is therefore an interval (possibly empty or unbounded) whose
ends are two linear programmes; the identified set is the union over the admissible signs.
With both signs allowed the two pieces lie on either side of the OLS estimate and touch only
when OLS and 2SLS agree, so an unknown sign usually gives two disjoint pieces.

One instrument, closed form (re-derived here; Nevo & Rosen 2012 write the bounds through
``V(λ) = σ_X Z − λ σ_Z X``): the sign-``s`` piece is
``{β(λ) : λ ∈ [0, r̄], s (ρ_xy ρ_zx − ρ_zy)/(ρ_zx − λ) ≥ 0}`` with
``β(λ) = cov(V(λ), y) / cov(V(λ), X) = (σ_y/σ_X)(ρ_zy − λ ρ_xy)/(ρ_zx − λ)``, monotone in
``λ`` on either side of the pole ``λ = ρ_zx``; see
:func:`sensiv.partial_id.correlation_moments.one_instrument_piece`.

How it is computed: the set and the curve come from the cvxpy programmes of
:mod:`sensiv.partial_id.correlation_programme` (built once per number of instruments, swept
through parameters); the smallest consistent ratio is a Charnes–Cooper programme per sign and
the breakdown ratio is exact in closed form.  Bootstrap replicates
(:mod:`sensiv.partial_id.correlation_bootstrap`: moments with multinomial counts as weights, so
no rows are copied) are solved by exact one-variable elimination of the same constraints, about
a hundred times faster than a cvxpy solve; the tests check it against the programmes.  With
``reps > 0`` the clean rows are held in memory for resampling.  The result objects are in
:mod:`sensiv.partial_id.correlation_results`.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np

from sensiv.core.errors import FewClustersWarning, InaccurateSolveWarning, InputError
from sensiv.core.limits import MAX_POINTS, MAX_REPS, check_count, check_seed
from sensiv.core.results import Interval, format_number
from sensiv.data import Layout, Spec, load
from sensiv.estimation.covariance import count_notes
from sensiv.estimation.absorb import Absorption
from sensiv.estimation.absorbed_source import absorb_source
from sensiv.estimation.iv import prepare
from sensiv.estimation.moments import Moments, accumulate
from sensiv.estimation.passes import moments_of
from sensiv.partial_id.correlation_bootstrap import bootstrap, resample_rows
from sensiv.partial_id.correlation_moments import PartialCorrelations, partial_correlations
from sensiv.partial_id.correlation_programme import (breakdown_ratio, compiled_programmes,
                                                     scale_piece, union)
from sensiv.partial_id.correlation_results import (CAUTION, BootstrapSummary, CorrelationBounds,
                                                   CurvePoint)

__all__ = ["CAUTION", "DEFAULT_MAX_RATIO", "DEFAULT_POINTS", "DEFAULT_REPS", "ENDOGENEITY",
           "CorrelationBounds", "Endogeneity", "check_one_treatment", "check_options",
           "correlation_bounds"]

Endogeneity = Literal["positive", "negative", "unknown"]
ENDOGENEITY: tuple[str, ...] = ("positive", "negative", "unknown")
_SIGNS = {"positive": (1,), "negative": (-1,), "unknown": (1, -1)}
_SIGN_NAMES = {1: "positive", -1: "negative"}

DEFAULT_MAX_RATIO = 1.0
DEFAULT_POINTS = 51
DEFAULT_REPS = 999
MIN_POINTS = 2
FIRST_STEPS = (1e-9, 1e-6, 1e-3)   # steps past the smallest consistent ratio (an infimum)


# ----------------------------------------------------------------------------- validation
def check_options(*, max_ratio: float, endogeneity: str, threshold: float, points: int,
                  reps: int, seed: int | None, confidence_level: float) -> None:
    """Validate the options (the caller's mistakes become :class:`InputError`)."""
    if not isinstance(max_ratio, (int, float)) or not 0.0 <= max_ratio <= 1.0:
        raise InputError(f"--max-ratio {max_ratio!r} is outside [0, 1]; the instrument's "
                         "correlation with the error may be at most as strong as the "
                         "treatment's: give a ratio such as 0.5 (0 is the exclusion restriction)")
    if endogeneity not in ENDOGENEITY:
        raise InputError(f"--endogeneity {endogeneity!r} is not a sign; choose one of "
                         f"{', '.join(ENDOGENEITY)}")
    if not isinstance(threshold, (int, float)) or not math.isfinite(threshold):
        raise InputError(f"--threshold {threshold!r} is not a finite number; give the effect "
                         "size whose inclusion breaks the conclusion, e.g. 0")
    if isinstance(points, bool) or not isinstance(points, (int, np.integer)) \
            or points < MIN_POINTS:
        raise InputError(f"--points {points!r} is too small; the curve needs at least "
                         f"{MIN_POINTS} ratios (the default is {DEFAULT_POINTS})")
    check_count(points, "--points", MIN_POINTS, MAX_POINTS, "curve points")
    if isinstance(reps, bool) or not isinstance(reps, (int, np.integer)) or reps < 0:
        raise InputError(f"--reps {reps!r} is not a number of bootstrap replicates; give a "
                         f"positive integer such as {DEFAULT_REPS}")
    check_count(reps, "--reps", 0, MAX_REPS, "bootstrap replicates")
    check_seed(seed)
    if not isinstance(confidence_level, (int, float)) or not 0.0 < confidence_level < 1.0:
        raise InputError(f"--level {confidence_level!r} is outside (0, 1); give a confidence "
                         "level such as 0.95")


def check_one_treatment(spec) -> None:
    """Raise :class:`InputError` unless ``spec`` names exactly one treatment."""
    if len(spec.treatments) != 1:
        raise InputError(
            f"the correlation bounds need exactly one treatment; got {len(spec.treatments)} "
            f"({', '.join(spec.treatments)}): pass a single --treatment (treat the others as "
            "controls if they are exogenous)")


# ----------------------------------------------------------------------------- main entry
def correlation_bounds(data, spec=None, *, max_ratio: float = DEFAULT_MAX_RATIO,
                       endogeneity: Endogeneity = "unknown", threshold: float = 0.0,
                       points: int = DEFAULT_POINTS, reps: int = DEFAULT_REPS,
                       seed: int | None = None, confidence_level: float = 0.95,
                       chunk_rows: int | None = None, progress: bool = True) -> CorrelationBounds:
    r"""Identified set, curve, breakdown ratio and bootstrap interval under the Nevo & Rosen
    (2012) correlation restriction.

    .. math::

        \operatorname{sign} ρ(Z_k, u) = \operatorname{sign} ρ(X, u),\qquad
        |ρ(Z_k, u)| ≤ \bar r\, |ρ(X, u)|,\quad 0 ≤ \bar r ≤ 1 .

    Parameters
    ----------
    data : sensiv.data source, pandas.DataFrame or path
    spec : sensiv.data.Spec, optional
        Required unless ``data`` is already a source; exactly one treatment.
    max_ratio : float in [0, 1]
        The ratio bound ``r̄``; the curve runs from 0 to it.
    endogeneity : {"positive", "negative", "unknown"}
        Known sign of ``corr(X, u)``, or the union over both signs.
    threshold : float
        Effect size for the breakdown ratio (the smallest ``r̄`` whose set contains it).
    points : int
        Grid points of the curve (at least 2), including 0 and ``max_ratio``.
    reps : int
        Bootstrap replicates (rows resampled, or whole clusters when the spec names a cluster
        column); 0 skips inference.
    seed : int, optional
        Seed of the bootstrap; drawn and reported when not given.
    confidence_level : float
    chunk_rows : int, optional
        Rows per chunk when reading a file.
    progress : bool
        Show a progress line on a terminal's stderr during a long bootstrap.

    Returns
    -------
    CorrelationBounds

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> from sensiv.data import Spec
    >>> rng = np.random.default_rng(0)
    >>> z, v = rng.normal(size=(2, 2000))
    >>> x = z + v
    >>> u = v + 0.2 * z + rng.normal(size=2000)    # corr(z, u) / corr(x, u) ≈ 0.24
    >>> frame = pd.DataFrame({"y": 2.0 * x + u, "x": x, "z": z})
    >>> res = correlation_bounds(frame, Spec("y", ["x"], ["z"]), max_ratio=0.5, reps=0,
    ...                          points=3, endogeneity="positive")
    >>> [round(v, 3) for v in (res.tsls, res.identified_set.low, res.identified_set.high)]
    [2.179, 1.177, 2.179]
    """
    check_options(max_ratio=max_ratio, endogeneity=endogeneity, threshold=threshold,
                  points=points, reps=reps, seed=seed, confidence_level=confidence_level)
    prepared = _prepare(data, spec, chunk_rows, keep_rows=bool(reps))
    layout, pc = prepared.layout, prepared.pc
    signs = _SIGNS[endogeneity]
    breakdown = breakdown_ratio(pc, signs, float(threshold))
    curve, by_sign, min_ratio, first = _sets(pc, signs, float(max_ratio), int(points),
                                             breakdown)
    notes = [*prepared.notes, *_notes(curve[-1], min_ratio, max_ratio, pc, layout, curve[0])]
    boot = _inference(prepared, signs, float(max_ratio), curve[-1].hull, reps, seed,
                      confidence_level, progress, notes)
    return CorrelationBounds(
        outcome=layout.outcome, treatment=layout.treatments[0],
        instruments=tuple(layout.instruments), controls=tuple(layout.controls),
        constant=layout.constant, n=prepared.moments.n, n_dropped=prepared.moments.n_dropped,
        weighted=prepared.spec.weight is not None, max_ratio=float(max_ratio),
        endogeneity=endogeneity, threshold=float(threshold),
        confidence_level=float(confidence_level), tsls=prepared.tsls, ols=prepared.ols,
        instrument_treatment_corr=tuple(float(v) for v in pc.zx),
        pieces=curve[-1].pieces, pieces_by_sign=by_sign, curve=curve,
        breakdown_ratio=breakdown,
        min_ratio_consistent=min_ratio, bootstrap=boot, notes=tuple(notes), first_pieces=first,
        n_filtered=prepared.moments.n_filtered, where=prepared.spec.where,
        absorption=prepared.absorption)


@dataclass(frozen=True, slots=True)
class _Prepared:
    """The data stage of :func:`correlation_bounds`: checked moments, the 2SLS and OLS
    coefficients of the treatment and the partial correlations (``chunks`` kept for the
    bootstrap, ``None`` without one)."""

    spec: Spec
    layout: Layout
    chunks: list | None
    moments: Moments
    tsls: float
    ols: float
    pc: PartialCorrelations
    notes: tuple[str, ...] = ()
    absorption: Absorption | None = None


def _prepare(data, spec, chunk_rows: int | None, *, keep_rows: bool) -> _Prepared:
    """Load and check the data, fit 2SLS and OLS, and take the partial correlations."""
    source = absorb_source(data if hasattr(data, "chunks")
                           else load(data, spec, chunk_rows=chunk_rows))
    check_one_treatment(source.spec)
    if not isinstance(source.spec.cluster, (str, type(None))):
        raise InputError(f"corrbound resamples whole clusters of one variable; got two cluster "
                         f"variables {list(source.spec.cluster)}: give one --cluster (two-way "
                         "clustering is available in fit, sweep, prior and calibrate)")
    layout = source.layout
    chunks = list(source.chunks()) if keep_rows else None
    moments = (accumulate(chunks, layout.columns) if chunks is not None
               else moments_of(source, layout.columns))
    absorption = getattr(source, "absorption", None)
    fitted = prepare(moments, layout, absorption.parameters("robust") if absorption else 0)
    pc = partial_correlations(moments, layout)
    if pc is None:
        raise InputError(f"outcome '{layout.outcome}' is fully explained by the controls (no "
                         "variation left after partialling them out); check the model")
    return _Prepared(source.spec, layout, chunks, moments, float(fitted.tsls.params[-1]),
                     float(fitted.ols.params[-1]), pc, tuple(getattr(source, "notes", ())),
                     absorption)


def _sets(pc: PartialCorrelations, signs: Sequence[int], max_ratio: float, points: int,
          breakdown: float | None
          ) -> tuple[tuple[CurvePoint, ...], tuple[tuple[str, Interval | None], ...],
                     float | None, tuple[Interval, ...]]:
    """The curve of sets from ``r̄ = 0`` to ``max_ratio``, the pieces by sign at ``max_ratio``,
    the smallest consistent ratio (0 when the set at ``r̄ = 0`` is non-empty) and the set
    there (just above it when it is an infimum; empty when no ratio is consistent)."""
    programmes = compiled_programmes(len(pc.zx))
    programmes.load(pc)
    curve = []
    by_sign: dict[int, tuple[float, float] | None] = {}
    for ratio in np.linspace(0.0, max_ratio, points):
        by_sign = {s: scale_piece(programmes.piece(s, float(ratio)), pc.scale) for s in signs}
        curve.append(CurvePoint(float(ratio), union([p for p in by_sign.values() if p])))
    if curve[0].pieces:
        min_ratio: float | None = 0.0
    else:
        least = [v for v in (programmes.least_ratio(s) for s in signs) if v is not None]
        min_ratio = min(least) if least and min(least) <= 1.0 else None
    named = tuple((_SIGN_NAMES[s], None if p is None else Interval(*p))
                  for s, p in by_sign.items())
    return tuple(curve), named, min_ratio, _first_set(programmes, pc, signs, min_ratio,
                                                      curve, breakdown)


def _first_set(programmes, pc: PartialCorrelations, signs: Sequence[int],
               min_ratio: float | None, curve: list[CurvePoint],
               breakdown: float | None) -> tuple[Interval, ...]:
    """The set at the smallest consistent ratio, or just above it (an infimum: the solver may
    find nothing exactly there, so step past it, never beyond the breakdown ratio, where the
    set would contain the threshold); empty when no ratio ≤ 1 is consistent."""
    if curve[0].pieces or min_ratio is None:
        return curve[0].pieces
    limit = 1.0 if breakdown is None else breakdown
    steps = [min_ratio * (1.0 + step) + step for step in FIRST_STEPS]
    steps += [p.max_ratio for p in curve if p.max_ratio > min_ratio]
    for ratio in (r for r in steps if r < limit):
        with warnings.catch_warnings():   # probing near an infimum: a failed probe is no news
            warnings.simplefilter("ignore", InaccurateSolveWarning)
            first = union([p for p in (scale_piece(programmes.piece(s, ratio), pc.scale)
                                       for s in signs) if p])
        if first:
            return first
    return ()


def _inference(prepared: _Prepared, signs: Sequence[int], max_ratio: float,
               hull: Interval | None, reps: int, seed: int | None, confidence_level: float,
               progress: bool, notes: list[str]) -> BootstrapSummary | None:
    """The bootstrap at ``max_ratio`` when the set has a finite end; notes are appended."""
    if reps and hull is not None and (math.isfinite(hull.low) or math.isfinite(hull.high)):
        if seed is None:
            seed = int(np.random.SeedSequence().generate_state(1)[0])
        rows = resample_rows(prepared.chunks, prepared.spec.cluster)
        if rows[2] is not None:
            for note in count_notes((int(rows[2].max()) + 1,), prepared.spec.cluster):
                notes.append(note.replace("cluster-robust standard errors are then biased "
                                          "downwards", "a bootstrap of whole clusters is "
                                          "then unreliable"))
                warnings.warn(notes[-1], FewClustersWarning, stacklevel=3)
        boot = bootstrap(rows, prepared.layout, signs, max_ratio, hull, int(reps), int(seed),
                         confidence_level, progress)
        if boot.n_failed:
            notes.append(
                f"{boot.n_failed} of {boot.reps} bootstrap replicates were left out "
                f"({boot.n_empty} with an empty set, {boot.n_unbounded} with an end unbounded "
                f"that is bounded in the estimate, {boot.n_degenerate} without variation in a "
                f"partialled variable); the standard errors use the remaining {boot.n_used}")
        if boot.ci is None:
            notes.append(f"only {boot.n_used} usable bootstrap replicates: no interval is "
                         "reported; increase --reps or check why replicates fail")
        return boot
    if reps and hull is None:
        notes.append("no bootstrap interval: the identified set is empty")
    elif reps:
        notes.append("no bootstrap interval: both ends of the set are unbounded, so the "
                     "interval is the whole line")
    return None


def _notes(final: CurvePoint, min_ratio: float | None, max_ratio: float,
           pc: PartialCorrelations, layout, at_zero: CurvePoint) -> list[str]:
    """What the reader should know about the set: empty, unbounded, in two pieces."""
    notes = []
    r = format_number(max_ratio)
    if not final.pieces:
        if min_ratio is None:
            notes.append(f"the identified set is empty at r̄ = {r} and stays empty up to "
                         "r̄ = 1: the data contradict the assumption (with the stated sign of "
                         "endogeneity) for every allowed ratio")
        else:
            notes.append(f"the identified set is empty at r̄ = {r}: the data contradict the "
                         f"assumption at this ratio; it is non-empty for r̄ above "
                         f"{format_number(min_ratio)} (smallest consistent ratio)")
    elif not at_zero.pieces and len(layout.instruments) > 1:
        notes.append("with several instruments the set at r̄ = 0 is empty unless the "
                     "instruments give exactly the same 2SLS estimate; that is expected, and "
                     "the smallest consistent ratio measures how far apart they are")
    hull = final.hull
    if hull is not None and not hull.bounded:
        corr = ", ".join(f"{name} {format_number(v, 3)}"
                         for name, v in zip(layout.instruments, pc.zx))
        notes.append(f"an end of the set is unbounded at r̄ = {r}: once r̄ reaches an "
                     "instrument's partial correlation with the treatment (here: "
                     f"{corr}), that instrument's correlation with the error can be large "
                     "enough to explain its whole reduced form, and it no longer bounds the "
                     "effect on that side")
    if len(final.pieces) > 1:
        notes.append("the set has two disjoint pieces, one per sign of the treatment's "
                     "endogeneity, separated by the OLS estimate; 'identified_set' is their hull")
    return notes
