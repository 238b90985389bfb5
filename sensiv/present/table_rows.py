"""Table rows per analysis kind: each builder reads a result object's facts and returns
:class:`~sensiv.present.tables.TableRow` objects (assumption, estimate or bounds, interval,
breakdown, n, covariance, caution).  The analysis registry names the builder of each kind."""

from __future__ import annotations

from sensiv.core import labels
from sensiv.core.results import Interval, format_number
from sensiv.estimation import iv
from sensiv.partial_id import correlation_results, discrete_results
from sensiv.present.tables import NONE_TEXT, TableRow, end_text, interval_text
from sensiv.present.text_clusters import cluster_count_text
from sensiv.present.text_units import table_words
from sensiv.sensitivity import bounds, calibrate, prior, published


def _pieces(pieces) -> tuple[Interval, ...]:
    return tuple(pieces)


def _ranges_text(names, boxes) -> str:
    return ", ".join(f"{labels.name(z)} in {interval_text(b.low, b.high)}"
                     for z, b in zip(names, boxes))


def _covariance_text(fit) -> str:
    text = fit.se_type + (", small-sample" if fit.small else "")
    if fit.n_clusters is not None:
        text += f", {cluster_count_text(fit)} clusters"
    return text


def fit_rows(fit) -> list[TableRow]:
    """2SLS for every treatment, and the Anderson–Rubin set (one treatment)."""
    rows = []
    for name in fit.treatments:
        rows.append(TableRow(f"2SLS: {labels.name(name)}", "exclusion restriction holds exactly",
                             fit.tsls.value(name), fit.tsls.std_error(name), None,
                             (fit.conf_int(name),), fit.confidence_level, None, NONE_TEXT,
                             fit.n, _covariance_text(fit), iv.CAUTION))
    if fit.ar_set is not None:
        rows.append(TableRow(f"Anderson–Rubin set: {labels.name(fit.treatments[0])}",
                             "exclusion restriction holds exactly; valid with a weak first "
                             "stage", None, None, None, _pieces(fit.ar_set),
                             fit.confidence_level, None, NONE_TEXT, fit.n,
                             _covariance_text(fit), iv.CAUTION))
    return rows


def _sweep_breakdown(res) -> str:
    return _scale_words(res, res.breakdown.scale, res.breakdown.direct_units)


def _scale_words(res, scale: float | None, units) -> str:
    """A breakdown in words (union or bias-aware interval): the direct effect it stands for
    (``units``, a ``DirectUnits`` or ``None``), then the scale of the stated set."""
    b = res.breakdown
    if scale is None:
        return (f"none within {format_number(bounds.SCALE_MAX)} × the stated set "
                f"(θ = {format_number(b.threshold)})")
    if scale == 0.0:
        return f"0: no conclusion about θ = {format_number(b.threshold)} at zero direct effect"
    sign = ">" if res.estimate > b.threshold else "<"
    outcome = getattr(res, "outcome", "outcome")
    lead = f"{table_words(units, outcome)} = " if units is not None else ""
    return (f"{lead}{format_number(scale)} × the stated set (β {sign} "
            f"{format_number(b.threshold)})")


def _bias_aware_row(res, name: str, words: str, n, cov: str,
                    caution: str = bounds.CAUTION) -> TableRow:
    """The bias-aware interval (2SLS at the set's centre) with its breakdown scale."""
    ba = res.bias_aware
    return TableRow(f"{name} (2SLS at the {ba.centre})", words, ba.estimate, ba.se,
                    None, (ba.ci,), res.confidence_level, res.breakdown.bias_aware_scale,
                    _scale_words(res, res.breakdown.bias_aware_scale, res.breakdown.bias_aware_units), n, cov,
                    caution, breakdown_units=res.breakdown.bias_aware_units)


def sweep_rows(res) -> list[TableRow]:
    """Identified set with the union of intervals, and the weak-IV-robust set."""
    shape = "polytope with bounding box " if res.polytope else ""
    words = f"direct effect in {shape}{_ranges_text(res.instruments, res.direct_set)}"
    cov = _covariance_text(res.fit)
    rows = [TableRow(f"direct-effect sweep: {labels.name(res.focus)}", words, None, None,
                     (res.identified_set,), (res.union_ci,), res.confidence_level,
                     res.breakdown.scale, _sweep_breakdown(res), res.n, cov, bounds.CAUTION,
                     breakdown_units=res.breakdown.direct_units)]
    if res.bias_aware is not None:
        rows.append(_bias_aware_row(res, f"bias-aware interval: {labels.name(res.focus)}",
                                    words, res.n, cov))
    opt = getattr(res, "bias_aware_optimal", None)
    if opt is not None and opt.traced:
        rows.append(TableRow(f"bias-aware interval, optimal weights: "
                             f"{labels.name(res.focus)}", words,
                             opt.interval.estimate, opt.interval.se, None, (opt.interval.ci,),
                             res.confidence_level, None, NONE_TEXT, res.n, cov,
                             bounds.CAUTION))
    if res.ar_set is not None:
        rows.append(TableRow(f"weak-IV-robust sweep: {labels.name(res.focus)}", words, None,
                             None, None,
                             _pieces(res.ar_set), res.confidence_level, None, NONE_TEXT,
                             res.n, cov, bounds.CAUTION))
    return rows


def prior_rows(res) -> list[TableRow]:
    laws = "; ".join(f"{labels.name(z)} ~ {p}" for z, p in zip(res.instruments, res.priors))
    method = res.method + ("" if res.mc_error is None else
                           f", Monte Carlo error {format_number(res.mc_error, 3)}")
    return [TableRow(f"prior interval: {labels.name(res.focus)}",
                     f"direct effect {laws} ({method})",
                     res.center, None, None, (res.interval,), res.confidence_level, None,
                     NONE_TEXT, res.n, _covariance_text(res.fit), prior.CAUTION)]


def corrbound_rows(res) -> list[TableRow]:
    words = (f"|corr(Z, u)| ≤ {format_number(res.max_ratio)}·|corr(X, u)|, same sign; "
             f"endogeneity {res.endogeneity}")
    k = res.breakdown_ratio
    text = _bound_breakdown("r̄", k, res.threshold, "set")
    if res.sign_reversal:
        text += (f"; a sign reversal against 2SLS: from r̄ = "
                 f"{format_number(res.min_ratio_consistent)} the set gives {res.conclusion}")
    if res.bootstrap is not None:
        b = res.bootstrap
        cov = (f"bootstrap, {b.reps} reps"
               + (f", {b.clusters} clusters" if b.clusters is not None else ", rows"))
    else:
        cov = "no bootstrap"
    return [TableRow(f"correlation bounds: {labels.name(res.treatment)}", words, None, None,
                     _pieces(res.pieces), (res.ci,) if res.ci is not None else None,
                     res.confidence_level, k, text, res.n, cov, correlation_results.CAUTION)]


ESTIMAND_WORDS = ("bounds the average effect over all units, Σ_z P̂(z)·E[Y(1,z) − Y(0,z)] — "
                  "not the complier effect that 2SLS estimates under monotonicity")


def discrete_rows(res) -> list[TableRow]:
    t = res.table
    words = (f"{labels.name(t.instrument)} randomised; changes {labels.name(t.outcome)} "
             f"directly for at most "
             f"{format_number(res.budget)} of units"
             + (f"; monotone (defiers ≤ {format_number(res.defier_budget)})"
                if res.monotone else "")
             + f"; {ESTIMAND_WORDS}")
    cov = (f"bootstrap, {res.bootstrap.reps} reps" if res.bootstrap is not None
           else "no bootstrap")
    rows = []
    for c in res.contrasts:
        k = c.breakdown_budget
        text = _bound_breakdown("ε", k, res.threshold, "bounds")
        rows.append(TableRow(
            f"discrete bounds: {labels.name(t.treatment)} {format_number(c.level)} vs "
            f"{format_number(c.base)}", words, None, None,
            (c.bounds,) if c.bounds is not None else (),
            (c.ci,) if c.ci is not None else None, res.confidence_level, k, text, t.n, cov,
            discrete_results.CAUTION))
    return rows


def published_rows(res) -> list[TableRow]:
    """The printed estimate; the identified set with the union of intervals and the breakdown;
    the weak-IV-robust set; the prior interval when a prior is given (all from the printed
    numbers, with the approximation they rest on)."""
    pct = f"{100 * res.confidence_level:g}%"
    cov = f"from reported numbers ({res.covariance.method})"
    box = res.direct_set
    words = (f"direct effect in {interval_text(box.low, box.high)} (outcome units; "
             "given as "
             f"{res.range_text})")
    # the curve at zero direct effect is the printed estimate's interval (unbounded when the
    # printed first stage is not significant)
    at_zero = Interval(float(res.curve.lower[0]), float(res.curve.upper[0]))
    rows = [TableRow("printed estimate", "exclusion restriction holds exactly (the printed "
                     f"estimate, its se and {pct} interval)", res.estimate, res.se, None,
                     (at_zero,), res.confidence_level, None, NONE_TEXT, res.reported.n, cov,
                     published.CAUTION),
            TableRow("direct-effect stress test from printed numbers", words, None, None,
                     (res.identified_set,), (res.union_ci,), res.confidence_level,
                     res.breakdown.scale, _sweep_breakdown(res), res.reported.n, cov,
                     published.CAUTION, breakdown_units=res.breakdown.direct_units)]
    if res.bias_aware is not None:
        rows.append(_bias_aware_row(res, "bias-aware interval from printed numbers", words,
                                    res.reported.n, cov, published.CAUTION))
    rows.append(TableRow("weak-IV-robust set from printed numbers", words, None, None, None,
                         _pieces(res.ar_set), res.confidence_level, None, NONE_TEXT,
                         res.reported.n, f"{cov}; {res.ar_method}", published.CAUTION))
    if res.prior is not None:
        p = res.prior
        method = p.method + ("" if p.mc_error is None else
                             f", Monte Carlo error {format_number(p.mc_error, 3)}")
        rows.append(TableRow("prior interval from printed numbers",
                             f"direct effect ~ {p.law} ({method})",
                             p.center, None, None, (p.interval,), res.confidence_level, None,
                             NONE_TEXT, res.reported.n, cov, published.CAUTION))
    return rows


def calibrate_rows(res) -> list[TableRow]:
    """The scale (reduced form and SDs) of each instrument, one row per leave-one-out yardstick
    and instrument, and the zero-first-stage estimate when there is one.  The estimates are
    direct effects of an instrument on the outcome, not effects of the treatment."""
    s = res.scale
    level = res.confidence_level
    rows = []
    for k, z in enumerate(s.instruments):
        rows.append(TableRow(
            f"calibration scale: reduced form of {labels.name(z)}",
            f"a reference scale, no assumption: a direct effect d of {labels.name(z)} reads as "
            f"d / reduced form or d · SD({z}) / SD({res.outcome}); SD({z}) = "
            f"{end_text(float(s.instrument_sd[k]))}, SD({res.outcome}) = {end_text(s.outcome_sd)}",
            float(s.reduced_form[k]), None, None, None, level, None, NONE_TEXT, res.n,
            "none (point values)", calibrate.CAUTION))
    for b in res.yardsticks:
        left = ", ".join(map(labels.name, b.columns))
        rows.append(TableRow(
            f"yardstick: {_direct_of(b.instrument)} without {labels.name(b.name)}",
            f"an unobserved direct effect comparable to the shift in the reduced form of "
            f"{labels.name(b.instrument)} when {left} "
            f"{'are' if len(b.columns) > 1 else 'is'} left out "
            "(a judgement, not a test)",
            b.implied_direct, None, None, None, level, None, NONE_TEXT, res.n,
            "none (point values)", calibrate.CAUTION, b.implied_direct_rf, b.implied_direct_sd,
            b.sweep_option))
    zfs = res.zero_first_stage
    if zfs is not None:
        f_words = ", ".join(f"{t}: {format_number(f, 4)}" for t, f in zfs.first_stage_f.items())
        doubt = "; premise doubtful" if zfs.premise_doubtful else ""
        for k, z in enumerate(zfs.instruments):
            rows.append(TableRow(
                f"zero-first-stage estimate: {_direct_of(z)} in {zfs.group} == 1",
                f"in the subgroup {zfs.group} == 1 the instruments do not move the treatment "
                f"(first-stage F there {f_words}{doubt}) and the direct effect is the same as "
                "in the whole sample",
                float(zfs.direct[k]), float(zfs.se[k]), None,
                (zfs.interval[k],) if zfs.interval else None, zfs.confidence_level, None,
                NONE_TEXT, zfs.n, zfs.se_type, calibrate.CAUTION, zfs.direct_rf[k],
                zfs.direct_sd[k],
                f"--prior {zfs.prior_options[k]}; {zfs.sweep_options[k]}"))
    return rows


def _direct_of(instrument: str) -> str:
    """How a calibration row names the instrument whose direct effect it measures."""
    return f"direct effect of {labels.name(instrument)}"


def _bound_breakdown(symbol: str, value: float | None, threshold: float, what: str) -> str:
    """A breakdown value in words; ``what`` is "set" (singular) or "bounds" (plural)."""
    theta = format_number(threshold)
    verb = "contains" if what == "set" else "contain"
    if value is None:
        return f"none for {symbol} ≤ 1 (θ = {theta})"
    if value == 0.0:
        return f"0: no conclusion, the {what} at {symbol} = 0 already {verb} θ = {theta}"
    return f"{symbol} = {format_number(value)} (the {what} first {verb} θ = {theta})"
