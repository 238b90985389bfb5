r"""Prior intervals for the focus coefficient when the direct effect ``γ`` is random.

The estimator satisfies ``β̂ ≈ β + a'γ + e`` with ``e ~ N(0, V)`` (``V``: the variance at
``γ = 0``).  Given a prior law for ``γ``:

* **normal** ``γ ~ N(μ, Ω)`` (Conley, Hansen & Rossi 2012, "local-to-zero"): closed form
  ``β̂ − a'μ ± c·√(V + a'Ωa)``;
* **other laws, one instrument**: the law of ``S = a'γ + e`` is a convolution whose CDF
  ``F(s) = E_γ Φ((s − aγ)/√V)`` is integrated numerically (quadrature) and inverted by root
  finding;
* **other laws, several instruments**: Monte Carlo, with the Monte Carlo error of the interval
  ends reported (batch means).

The interval is ``[β̂ − q_S(1 − α/2), β̂ − q_S(α/2)]``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from sensiv.core.errors import InputError
from sensiv.core.limits import MAX_DRAWS, check_count, check_seed
from sensiv.core.progress import Progress
from sensiv.core.results import Interval, Presentable, describe, json_number
from sensiv.data.where import filter_assumptions
from sensiv.estimation import iv
from sensiv.sensitivity.linear_core import Core, build_core, focus_block, focus_index
from sensiv.sensitivity.direct_sets import scale_of_pieces
from sensiv.sensitivity.prior_laws import Prior, law_text, parse_prior, read_prior_file

CAUTION = ("Caution: a prior interval averages over the stated law of the direct effect; it is "
           "only as credible as that law (a prior centred elsewhere or spread wider gives a "
           "different interval), and it does not prove that the instrument is valid.")
MC_DRAWS = 200_000
MC_BATCHES = 20
QUANTILE_SPAN = 12.0     # search quantiles within this many SDs of the mean
# The prior map: a PRIOR_MAP_POINTS × PRIOR_MAP_POINTS grid of normal priors.  Means span the
# given prior mean, zero and the mean that centres the interval on the threshold, widened by
# PRIOR_MAP_MARGIN of that span (at least PRIOR_MAP_SPREAD prior SDs) on each side; SDs run
# from 0 to PRIOR_MAP_SD_REACH times the larger of the given SD and the SD at which a prior
# centred at zero direct effect first reaches the threshold.
PRIOR_MAP_POINTS = 41
PRIOR_MAP_MARGIN = 0.5
PRIOR_MAP_SPREAD = 2.0
PRIOR_MAP_SD_REACH = 1.5


@dataclass(frozen=True, slots=True)
class PriorMap:
    """Closed-form normal prior intervals over a grid of prior means × prior SDs.

    With one instrument the axes are the prior mean and SD of its direct effect ``γ`` (outcome
    units, ``axis = "direct effect"``); with several the interval depends on the prior only
    through the bias ``a'γ`` of 2SLS, so the axes are the prior mean ``a'μ`` and SD
    ``√(a'Ωa)`` of that bias (units of the coefficient, ``axis = "bias"``).  Entry ``[i, j]``
    of ``lower``/``upper``/``excludes`` belongs to ``sd[i]`` and ``mean[j]``; ``excludes``
    says whether the interval leaves out ``threshold``.  ``given`` is the analysed prior's
    ``(mean, sd)`` on these axes (for a non-normal law: its mean and SD).
    """

    axis: str
    threshold: float
    mean: np.ndarray
    sd: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    excludes: np.ndarray
    given: tuple[float, float]
    estimate: float = math.nan          # 2SLS at zero direct effect: the side that is "kept"

    @property
    def region(self) -> np.ndarray:
        """Per grid point: ``1`` the interval lies on the same side of the threshold as 2SLS
        at zero direct effect (conclusion kept), ``0`` it contains the threshold, ``-1`` it
        lies wholly on the other side (conclusion reversed)."""
        above = self.lower > self.threshold
        below = self.upper < self.threshold
        side = 1.0 if self.estimate >= self.threshold else -1.0
        return np.where(above, side, np.where(below, -side, 0.0)).astype(int)

    @property
    def margin(self) -> np.ndarray:
        """How far the threshold lies outside the interval (negative: inside); the boundary of
        ``excludes`` is the zero contour."""
        return np.maximum(self.lower - self.threshold, self.threshold - self.upper)

    def to_dict(self) -> dict:
        return {"axis": self.axis, "threshold": self.threshold,
                "mean": self.mean.tolist(), "sd": self.sd.tolist(),
                "lower": self.lower.tolist(), "upper": self.upper.tolist(),
                "excludes": self.excludes.tolist(), "region": self.region.tolist(),
                "given": {"mean": self.given[0], "sd": self.given[1]}}


def prior_map(core: Core, mean: np.ndarray, cov: np.ndarray, threshold: float,
              points: int = PRIOR_MAP_POINTS) -> PriorMap:
    r"""Normal prior intervals ``β̂ − m ± c·√(V + s²)`` over a grid of bias means ``m`` and
    SDs ``s`` centred on the given prior (closed form, microseconds).

    ``mean``/``cov`` are the given prior's mean vector and covariance (for a non-normal law its
    moments).  One instrument: ``m = aμ``, ``s = |a|σ`` with the axes in ``(μ, σ)``.

    Examples
    --------
    >>> core = Core("x", ("z",), 1.0, np.array([2.0]), np.diag([0.01, 0.0]), 1.96)
    >>> pm = prior_map(core, np.array([0.0]), np.array([[0.01]]), 0.0, points=5)
    >>> pm.axis, pm.given, pm.excludes.shape
    ('direct effect', (0.0, 0.1), (5, 5))
    """
    slope = core.slope
    v0 = float(core.quad[0, 0])
    c = core.critical
    d = core.estimate - threshold
    if slope.size == 1:
        a = float(slope[0])
        mu0, sd0 = float(mean[0]), math.sqrt(max(float(cov[0, 0]), 0.0))
        axis = "direct effect"
    else:
        a = 1.0
        mu0 = float(slope @ mean)
        sd0 = math.sqrt(max(float(slope @ cov @ slope), 0.0))
        axis = "bias"
    # Prior means of γ whose interval is centred on the threshold, and the SD at which the
    # interval of a prior centred at zero first reaches it.
    anchors = [mu0, 0.0]
    reach = 0.0
    if a != 0.0:
        anchors.append(d / a)
        reach = math.sqrt(max(d * d / (c * c) - v0, 0.0)) / abs(a)
    low, high = min(anchors), max(anchors)
    pad = max(PRIOR_MAP_MARGIN * (high - low), PRIOR_MAP_SPREAD * sd0)
    if not pad > 0.0:
        pad = max(abs(low), math.sqrt(v0) / abs(a) if a else 1.0, 1e-12)
    means = np.linspace(low - pad, high + pad, points)
    sd_top = PRIOR_MAP_SD_REACH * max(sd0, reach)
    if not sd_top > 0.0:
        sd_top = pad
    sds = np.linspace(0.0, sd_top, points)
    centre = core.estimate - a * means[None, :]
    half = c * np.sqrt(v0 + (a * sds[:, None]) ** 2)
    lower = np.broadcast_to(centre - half, (points, points)).copy()
    upper = np.broadcast_to(centre + half, (points, points)).copy()
    excludes = (lower > threshold) | (upper < threshold)
    return PriorMap(axis, float(threshold), means, sds, lower, upper, excludes, (mu0, sd0),
                    float(core.estimate))


@dataclass(frozen=True, slots=True)
class PriorResult(Presentable):
    """Interval for the focus coefficient under a prior law of the direct effect."""

    focus: str
    outcome: str
    instruments: tuple[str, ...]
    n: int
    se_type: str
    confidence_level: float
    estimate: float
    se: float
    interval: Interval
    center: float
    method: str
    mc_error: float | None
    priors: tuple[str, ...]
    draws: int | None
    seed: int | None
    fit: iv.IVFit
    notes: tuple[str, ...] = field(default=())
    prior_map: PriorMap | None = None

    def assumptions(self) -> list[str]:
        return [
            f"direct effects of the instruments on {self.outcome}: "
            + "; ".join(f"{z} ~ {p}" for z, p in zip(self.instruments, self.priors)),
            "the direct effect is independent of the sampling error of 2SLS, whose law is "
            "approximately normal",
            "apart from the direct effect, the instruments are as good as randomly assigned "
            "given the controls",
        ] + filter_assumptions(self.fit.where, self.fit.n_filtered) + (
            iv.absorb_assumptions(self.fit))

    def to_dict(self) -> dict:
        return iv.absorb_keys(self.fit) | {
            "interval": self.interval.to_list(),
            "center": json_number(self.center),
            "method": self.method,
            "mc_error": json_number(self.mc_error),
            "focus": self.focus,
            "estimate": self.estimate,
            "se": self.se,
            "n": self.n,
            "n_dropped": self.fit.n_dropped,
            "n_filtered": self.fit.n_filtered,
            "se_type": self.se_type,
            "confidence_level": self.confidence_level,
            "priors": list(self.priors),
            "draws": self.draws,
            "seed": self.seed,
            "overid": self.fit.overid.to_dict() if self.fit.overid else None,
            "prior_map": self.prior_map.to_dict() if self.prior_map is not None else None,
            "notes": list(self.notes),
            "assumptions": self.assumptions(),
            "caution": CAUTION,
        }

    def __str__(self) -> str:
        return describe(self)


def normal_interval(core: Core, mean: np.ndarray, cov: np.ndarray) -> tuple[Interval, float]:
    """Closed form ``β̂ − a'μ ± c·√(V + a'Ωa)`` (Conley, Hansen & Rossi 2012)."""
    center = core.estimate - float(core.slope @ mean)
    sd = math.sqrt(core.quad[0, 0] + float(core.slope @ cov @ core.slope))
    return Interval(center - core.critical * sd, center + core.critical * sd), center


def _tail_probabilities(level: float) -> tuple[float, float]:
    alpha = 1.0 - level
    return 0.5 * alpha, 1.0 - 0.5 * alpha


def quadrature_interval(core: Core, prior: Prior, level: float) -> tuple[Interval, float]:
    """One instrument, non-normal prior: invert the CDF of ``S = aγ + e`` by quadrature."""
    from scipy.integrate import quad
    from scipy.optimize import brentq
    from scipy.special import ndtr

    a = float(core.slope[0])
    sigma = math.sqrt(core.quad[0, 0])
    lo_g, hi_g = prior.params[0], prior.params[-1]
    breaks = sorted(set(prior.params))

    def cdf(s: float) -> float:
        def integrand(g: float) -> float:
            return float(ndtr((s - a * g) / sigma) * prior.density(g))

        total = 0.0
        for left, right in zip(breaks[:-1], breaks[1:]):
            total += quad(integrand, left, right, epsabs=1e-13, epsrel=1e-11, limit=200)[0]
        return total

    mean_s = a * prior.mean()
    sd_s = math.sqrt(sigma**2 + a * a * prior.variance())
    p_lo, p_hi = _tail_probabilities(level)
    span = QUANTILE_SPAN * sd_s + abs(a) * (hi_g - lo_g)
    q = [brentq(lambda s, p=p: cdf(s) - p, mean_s - span, mean_s + span, xtol=1e-14 * sd_s)
         for p in (p_lo, p_hi)]
    center = core.estimate - mean_s
    return Interval(core.estimate - q[1], core.estimate - q[0]), center


def simulated_interval(core: Core, priors: Sequence[Prior], level: float, draws: int,
                       seed: int | None, progress: bool = True
                       ) -> tuple[Interval, float, float]:
    """Monte Carlo interval with its Monte Carlo error (largest batch-means SE of the ends);
    ``progress`` allows a progress bar on a terminal's stderr."""
    rng = np.random.default_rng(seed)
    sigma = math.sqrt(core.quad[0, 0])
    per_batch = max(draws // MC_BATCHES, 1)
    p_lo, p_hi = _tail_probabilities(level)
    samples, ends = [], []
    bar = Progress(MC_BATCHES, label="simulating the prior interval", enabled=progress)
    for b in range(MC_BATCHES):
        gamma = np.column_stack([p.sample(rng, per_batch) for p in priors])
        s = gamma @ core.slope + sigma * rng.standard_normal(per_batch)
        samples.append(s)
        ends.append(np.quantile(s, [p_lo, p_hi]))
        bar.update(b + 1)
    bar.close()
    s = np.concatenate(samples)
    q_lo, q_hi = np.quantile(s, [p_lo, p_hi])
    ends = np.array(ends)
    mc_error = float(np.max(ends.std(axis=0, ddof=1)) / math.sqrt(MC_BATCHES))
    center = core.estimate - float(core.slope @ np.array([p.mean() for p in priors]))
    return Interval(core.estimate - q_hi, core.estimate - q_lo), center, mc_error


def outcome_laws(laws: Sequence[Prior], pieces) -> tuple[list[Prior], tuple[str, ...]]:
    """The laws in outcome units, and how each reads in the output: as given when it was
    stated in outcome units, else ``"normal:0:0.00123 (given as normal:0:0.1rf)"``."""
    if all(law.unit == "outcome" for law in laws):
        return list(laws), tuple(law.text() for law in laws)
    scale = scale_of_pieces(pieces)
    out = [law.in_outcome_units(scale.to_outcome(k, 1.0, law.unit)) for k, law in
           enumerate(laws)]
    texts = tuple(law_text(new, law) for law, new in zip(laws, out))
    return out, texts


def prior_analysis(data, spec=None, *, priors: Sequence[Prior | str] | None = None,
                   prior_file: str | None = None, se: str | None = None,
                   confidence_level: float = 0.95, small: bool = False,
                   focus: str | None = None, draws: int = MC_DRAWS, seed: int | None = 0,
                   chunk_rows: int | None = None, threshold: float = 0.0,
                   progress: bool = True) -> PriorResult:
    """Prior interval for the focus coefficient from data (two passes over the rows).

    Parameters
    ----------
    priors : sequence of Prior or str, optional
        One law per instrument (``normal:MEAN:SD``, ``uniform:LOW:HIGH``,
        ``triangular:LOW:MODE:HIGH``), independent across instruments.
    prior_file : path, optional
        TOML/JSON with a mean vector and covariance (multivariate normal), instead of ``priors``.
    draws, seed : Monte Carlo settings (used only for non-normal laws with several instruments).
    progress : bool
        Allow a progress bar on a terminal's stderr during the Monte Carlo simulation.
    threshold : float
        The effect size examined by the prior map (:func:`prior_map`): over a grid of normal
        priors around the given one, whether the interval excludes it.
    """
    if (priors is None) == (prior_file is None):
        raise InputError("give either one --prior per instrument or --prior-file FILE")
    laws = [parse_prior(p) if isinstance(p, str) else p for p in (priors or [])]
    if isinstance(threshold, bool) or not isinstance(threshold, (int, float)) \
            or not math.isfinite(threshold):
        raise InputError(f"--threshold {threshold!r} is not a finite number; give the effect "
                         "size the prior map examines, e.g. 0")
    check_count(draws, "--draws", MC_BATCHES * 50, MAX_DRAWS, "Monte Carlo draws")
    seed = check_seed(seed)
    source = iv.as_source(data, spec, chunk_rows=chunk_rows)
    instruments = source.layout.instruments
    if laws and len(laws) != len(instruments):
        raise InputError(f"{len(laws)} --prior law(s) for {len(instruments)} instrument(s) "
                         f"({', '.join(instruments)}); give one per instrument, in order")
    moments_file = read_prior_file(prior_file, instruments) if prior_file else None
    j = focus_index(source.layout.treatments, focus)
    se = se or iv.default_se(source.spec)
    result, pieces, sums = iv.fit_with_pieces(
        source, se=se, confidence_level=confidence_level, small=small,
        extra_blocks=lambda p: [] if se == "classic" else [focus_block(p, j)])
    core = build_core(pieces, sums, result, j)
    laws, given = outcome_laws(laws, pieces)
    mc_error, used_draws, used_seed = None, None, None
    if moments_file is not None:
        mean, cov = moments_file
        interval, center = normal_interval(core, mean, cov)
        method = "closed-form"
        texts = tuple(f"normal:{m:g}:{math.sqrt(max(c, 0.0)):g} (joint, from {prior_file})"
                      for m, c in zip(mean, np.diag(cov)))
    elif all(p.kind == "normal" for p in laws):
        mean = np.array([p.params[0] for p in laws])
        cov = np.diag([p.params[1] ** 2 for p in laws])
        interval, center = normal_interval(core, mean, cov)
        method = "closed-form"
        texts = given
    elif len(laws) == 1:
        interval, center = quadrature_interval(core, laws[0], confidence_level)
        method = "quadrature"
        texts = given
    else:
        interval, center, mc_error = simulated_interval(core, laws, confidence_level, draws,
                                                        seed, progress)
        method = "simulation"
        used_draws, used_seed = draws, seed
        texts = given
    if moments_file is None:
        mean = np.array([p.mean() for p in laws])
        cov = np.diag([p.variance() for p in laws])
    pmap = prior_map(core, mean, cov, float(threshold))
    return PriorResult(
        focus=core.focus, outcome=pieces.design.outcome, instruments=core.instruments,
        n=result.n, se_type=result.se_type, confidence_level=confidence_level,
        estimate=core.estimate, se=core.se, interval=interval, center=center, method=method,
        mc_error=mc_error, priors=texts, draws=used_draws, seed=used_seed, fit=result,
        notes=result.notes, prior_map=pmap)
