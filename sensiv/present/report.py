"""Tables and output bundles (formatting and writing only; nothing new is computed here).

Per analysis (fit, sweep, prior, correlation bounds, discrete bounds, a stress test from
published numbers, a calibration) :func:`results_table` collects rows — assumption, estimate
or bounds, interval, breakdown, n, covariance — that
:func:`table_markdown`, :func:`table_latex` (booktabs), :func:`table_csv` and
:func:`table_json` render; :func:`table_files` and :func:`figure_files` return name → content
dicts for :func:`write_bundle`.

Files are written atomically: everything goes to a temporary folder beside the target first and
is moved into place only when every file has been written, so a failure leaves no half-written
output behind.
"""

from __future__ import annotations

import json
import math
import os
import shutil
import tempfile
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

from sensiv.core.errors import InputError
from sensiv.core.results import Interval, format_number, intervals_to_lists, json_number


def to_json(document: Mapping) -> str:
    """One JSON document: sorted keys for reproducibility, ``null`` for infinite ends."""
    return json.dumps(document, indent=2, sort_keys=True, allow_nan=False) + "\n"


def markdown_table(header: list[str], rows: list[list[str]]) -> str:
    """A GitHub-flavoured Markdown table with escaped pipes."""
    def cell(text: str) -> str:
        return str(text).replace("|", "\\|")

    lines = ["| " + " | ".join(cell(h) for h in header) + " |",
             "|" + "|".join("---" for _ in header) + "|"]
    lines += ["| " + " | ".join(cell(c) for c in r) + " |" for r in rows]
    return "\n".join(lines) + "\n"


def fit_markdown(fit) -> str:
    """Markdown report of a 2SLS fit: coefficients, first stages, AR set, overid, assumptions."""
    from sensiv.estimation.iv import CAUTION

    pct = f"{100 * fit.confidence_level:g}%"
    rows = []
    for name in fit.reported_names():
        ci = fit.conf_int(name)
        rows.append([name, format_number(fit.tsls.value(name), 6),
                     format_number(fit.tsls.std_error(name), 6), str(ci),
                     format_number(fit.ols.value(name), 6),
                     format_number(fit.ols.std_error(name), 6)])
    parts = [
        f"# 2SLS: {fit.outcome} on {', '.join(fit.treatments)}\n",
        f"Instruments: {', '.join(fit.instruments)}. Controls: "
        f"{', '.join(fit.controls) if fit.controls else 'none'}"
        f"{' and a constant' if fit.constant else ''}. n = {fit.n} "
        f"({fit.n_dropped} rows dropped for missing values). Covariance: {fit.se_type}"
        f"{' with small-sample corrections' if fit.small else ''}"
        f"{f', {fit.n_clusters} clusters' if fit.n_clusters is not None else ''}.\n",
        markdown_table(["coefficient", "2SLS", "se", f"{pct} CI", "OLS", "OLS se"], rows),
        "\n## First stage\n",
        markdown_table(
            ["treatment", "instrument", "coef", "se", "F", "partial R²", "effective F"],
            [[fs.treatment, inst, format_number(fs.coef[inst], 6), format_number(fs.se[inst], 6),
              format_number(fs.f, 5), format_number(fs.partial_r2, 4),
              format_number(fs.effective_f, 5) if fs.effective_f is not None else "n/a"]
             for fs in fit.first_stages for inst in fit.instruments]),
    ]
    if fit.ar_set is not None:
        pieces = " ∪ ".join(str(p) for p in fit.ar_set) if fit.ar_set else "empty"
        parts.append(f"\nAnderson–Rubin {pct} confidence set for {fit.treatments[0]}: "
                     f"{pieces}\n")
    if fit.overid is not None:
        o = fit.overid
        parts.append(f"\nOveridentification test ({o.name}): {format_number(o.stat, 5)} on "
                     f"{o.df} df, p = {format_number(o.p_value, 3)}\n")
    for note in fit.notes:
        parts.append(f"\n**Warning:** {note}\n")
    parts.append("\n## Assumptions\n\n" + "\n".join(f"- {a}" for a in fit.assumptions()) + "\n")
    parts.append(f"\n> {CAUTION}\n")
    return "".join(parts)


def write_bundle(directory: str | os.PathLike, files: Mapping[str, str | bytes]) -> list[Path]:
    """Write ``files`` (name → content) into ``directory`` atomically.

    All files are first written to a temporary folder next to ``directory``; only when every
    write succeeded are they moved into place.  Names may contain ``/`` for subfolders.
    Returns the final paths.
    """
    target = Path(directory)
    parent = target.resolve().parent
    parent.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=f".{target.name}-", dir=parent))
    try:
        for name, content in files.items():
            path = staging / name
            path.parent.mkdir(parents=True, exist_ok=True)
            if isinstance(content, bytes):
                path.write_bytes(content)
            else:
                path.write_text(content, encoding="utf-8")
        target.mkdir(parents=True, exist_ok=True)
        out = []
        for name in files:
            final = target / name
            final.parent.mkdir(parents=True, exist_ok=True)
            os.replace(staging / name, final)
            out.append(final)
        return out
    finally:
        shutil.rmtree(staging, ignore_errors=True)


def sweep_markdown(res) -> str:
    """Markdown report of a direct-effect sweep."""
    from sensiv.sensitivity.bounds import CAUTION

    pct = f"{100 * res.confidence_level:g}%"
    b = res.breakdown
    scale = "never (within 1000x)" if b.scale is None else format_number(b.scale, 6)
    rows = [
        ["2SLS at zero direct effect", f"{format_number(res.estimate, 6)} (se "
                                       f"{format_number(res.se, 6)})"],
        ["identified set", str(res.identified_set)],
        [f"union of {pct} intervals", str(res.union_ci)],
        [f"weak-IV-robust {pct} set", " ∪ ".join(str(p) for p in res.ar_set)
         if res.ar_set else ("empty" if res.ar_set is not None else "n/a")],
        ["conclusion examined", b.conclusion],
        ["breakdown scale of the set", scale],
    ]
    for z, lo, hi in zip(res.instruments, b.direct_lower, b.direct_upper):
        rows.append([f"breakdown direct effect, {z} alone",
                     f"{'none' if lo is None else format_number(lo, 6)} / "
                     f"{'none' if hi is None else format_number(hi, 6)}"])
    ranges = markdown_table(
        ["instrument", "outcome units", "share of reduced form", "SD units"],
        [[z, str(a), str(r), str(s)] for z, a, r, s in
         zip(res.instruments, res.direct_set, res.direct_set_rf, res.direct_set_sd)])
    notes = "".join(f"\n**Warning:** {n}\n" for n in res.notes)
    return (f"# Direct-effect sensitivity: {res.focus} → {res.outcome}\n\n"
            f"n = {res.n}, covariance: {res.se_type}.\n\n## Assumed direct effects\n\n{ranges}\n"
            f"## Results\n\n{markdown_table(['quantity', 'value'], rows)}{notes}\n"
            "## Assumptions\n\n" + "\n".join(f"- {a}" for a in res.assumptions())
            + f"\n\n> {CAUTION}\n")


def curve_csv(res) -> str:
    """The sensitivity curve as CSV (scale, union interval, identified set)."""
    lines = ["scale,lower,upper,id_lower,id_upper"]
    for row in res.curve.to_list():
        lines.append(",".join("" if row[k] is None else repr(float(row[k]))
                              for k in ("scale", "lower", "upper", "id_lower", "id_upper")))
    return "\n".join(lines) + "\n"


def sweep_files(res) -> dict[str, str]:
    return {"sweep.json": to_json(res.to_dict()), "sweep.md": sweep_markdown(res),
            "curve.csv": curve_csv(res)}


def prior_markdown(res) -> str:
    from sensiv.sensitivity.bounds import CAUTION

    pct = f"{100 * res.confidence_level:g}%"
    rows = [["2SLS at zero direct effect", f"{format_number(res.estimate, 6)} (se "
                                           f"{format_number(res.se, 6)})"],
            [f"{pct} prior interval", str(res.interval)],
            ["center", format_number(res.center, 6)],
            ["method", res.method],
            ["Monte Carlo error", "n/a" if res.mc_error is None else format_number(res.mc_error,
                                                                                   3)]]
    return (f"# Prior interval: {res.focus} → {res.outcome}\n\n"
            + markdown_table(["quantity", "value"], rows)
            + "\n## Assumptions\n\n" + "\n".join(f"- {a}" for a in res.assumptions())
            + f"\n\n> {CAUTION}\n")


def prior_files(res) -> dict[str, str]:
    return {"prior.json": to_json(res.to_dict()), "prior.md": prior_markdown(res)}


# ============================================================================ result tables
# One row per analysis (or per reported set of it): the assumption, the estimate or bounds, the
# interval, the breakdown value, n and the covariance.  Every number is read from a result
# object; the renderers below only format it (Markdown, LaTeX with booktabs, CSV, JSON).
@dataclass(frozen=True, slots=True)
class TableRow:
    """One analysis in a results table.

    ``bounds`` is an identified set or bounds as disjoint pieces (``None``: not applicable,
    ``()``: empty); ``interval`` a confidence or prior interval (``None``: not available);
    either may have infinite ends.  ``breakdown`` is the breakdown value in the unit that
    ``breakdown_text`` names.  ``n`` is ``None`` when the source does not give it (a published
    table).  Calibration rows also read the estimate (a direct effect) as a share of the
    reduced form (``share_rf``) and in SD units (``sd_units``), and carry the options they
    suggest for ``sweep`` or ``prior`` (``suggestion``).
    """

    analysis: str
    assumption: str
    estimate: float | None
    se: float | None
    bounds: tuple[Interval, ...] | None
    interval: tuple[Interval, ...] | None
    confidence_level: float
    breakdown: float | None
    breakdown_text: str
    n: int | None
    covariance: str
    caution: str
    share_rf: float | None = None
    sd_units: float | None = None
    suggestion: str | None = None


@dataclass(frozen=True, slots=True)
class Table:
    """Rows plus the full assumptions of each analysis (``notes``: heading → lines)."""

    title: str
    rows: tuple[TableRow, ...]
    notes: tuple[tuple[str, tuple[str, ...]], ...]

    @property
    def cautions(self) -> tuple[str, ...]:
        return tuple(dict.fromkeys(r.caution for r in self.rows))


COLUMNS = ("analysis", "assumption", "estimate or bounds", "interval", "breakdown", "n",
           "covariance")
CSV_COLUMNS = ("analysis", "assumption", "estimate", "se", "bounds_lower", "bounds_upper",
               "bounds_pieces", "interval_lower", "interval_upper", "interval_pieces",
               "confidence_level", "breakdown", "breakdown_meaning", "n", "covariance",
               "caution", "share_of_reduced_form", "sd_units", "suggestion")
NONE_TEXT = "—"


def _pieces(pieces) -> tuple[Interval, ...]:
    return tuple(pieces)


def _ranges_text(names, boxes) -> str:
    return ", ".join(f"{z} in [{_end(b.low)}, {_end(b.high)}]" for z, b in zip(names, boxes))


def _covariance_text(fit) -> str:
    text = fit.se_type + (", small-sample" if fit.small else "")
    if fit.n_clusters is not None:
        text += f", {fit.n_clusters} clusters"
    return text


def fit_rows(fit) -> list[TableRow]:
    """2SLS for every treatment, and the Anderson–Rubin set (one treatment)."""
    from sensiv.estimation.iv import CAUTION

    rows = []
    for name in fit.treatments:
        rows.append(TableRow(f"2SLS: {name}", "exclusion restriction holds exactly",
                             fit.tsls.value(name), fit.tsls.std_error(name), None,
                             (fit.conf_int(name),), fit.confidence_level, None, NONE_TEXT,
                             fit.n, _covariance_text(fit), CAUTION))
    if fit.ar_set is not None:
        rows.append(TableRow(f"Anderson–Rubin set: {fit.treatments[0]}",
                             "exclusion restriction holds exactly; valid with a weak first "
                             "stage", None, None, None, _pieces(fit.ar_set),
                             fit.confidence_level, None, NONE_TEXT, fit.n,
                             _covariance_text(fit), CAUTION))
    return rows


def _sweep_breakdown(res) -> str:
    from sensiv.sensitivity.bounds import SCALE_MAX

    b = res.breakdown
    if b.scale is None:
        return (f"none within {format_number(SCALE_MAX)} × the stated set "
                f"(θ = {format_number(b.threshold)})")
    if b.scale == 0.0:
        return f"0: no conclusion about θ = {format_number(b.threshold)} at zero direct effect"
    sign = ">" if res.estimate > b.threshold else "<"
    return f"{format_number(b.scale)} × the stated set (β {sign} {format_number(b.threshold)})"


def sweep_rows(res) -> list[TableRow]:
    """Identified set with the union of intervals, and the weak-IV-robust set."""
    from sensiv.sensitivity.bounds import CAUTION

    shape = "polytope with bounding box " if res.polytope else ""
    words = f"direct effect in {shape}{_ranges_text(res.instruments, res.direct_set)}"
    cov = _covariance_text(res.fit)
    rows = [TableRow(f"direct-effect sweep: {res.focus}", words, None, None,
                     (res.identified_set,), (res.union_ci,), res.confidence_level,
                     res.breakdown.scale, _sweep_breakdown(res), res.n, cov, CAUTION)]
    if res.ar_set is not None:
        rows.append(TableRow(f"weak-IV-robust sweep: {res.focus}", words, None, None, None,
                             _pieces(res.ar_set), res.confidence_level, None, NONE_TEXT,
                             res.n, cov, CAUTION))
    return rows


def prior_rows(res) -> list[TableRow]:
    from sensiv.sensitivity.bounds import CAUTION

    laws = "; ".join(f"{z} ~ {p}" for z, p in zip(res.instruments, res.priors))
    method = res.method + ("" if res.mc_error is None else
                           f", Monte Carlo error {format_number(res.mc_error, 3)}")
    return [TableRow(f"prior interval: {res.focus}", f"direct effect {laws} ({method})",
                     res.center, None, None, (res.interval,), res.confidence_level, None,
                     NONE_TEXT, res.n, _covariance_text(res.fit), CAUTION)]


def corrbound_rows(res) -> list[TableRow]:
    from sensiv.partial_id.correlation import CAUTION

    words = (f"|corr(Z, u)| ≤ {format_number(res.max_ratio)}·|corr(X, u)|, same sign; "
             f"endogeneity {res.endogeneity}")
    k = res.breakdown_ratio
    text = _bound_breakdown("r̄", k, res.threshold, "set")
    if res.bootstrap is not None:
        b = res.bootstrap
        cov = (f"bootstrap, {b.reps} reps"
               + (f", {b.clusters} clusters" if b.clusters is not None else ", rows"))
    else:
        cov = "no bootstrap"
    return [TableRow(f"correlation bounds: {res.treatment}", words, None, None,
                     _pieces(res.pieces), (res.ci,) if res.ci is not None else None,
                     res.confidence_level, k, text, res.n, cov, CAUTION)]


def discrete_rows(res) -> list[TableRow]:
    from sensiv.partial_id.discrete_results import CAUTION

    t = res.table
    words = (f"{t.instrument} randomised; changes {t.outcome} directly for at most "
             f"{format_number(res.budget)} of units"
             + (f"; monotone (defiers ≤ {format_number(res.defier_budget)})"
                if res.monotone else ""))
    cov = (f"bootstrap, {res.bootstrap.reps} reps" if res.bootstrap is not None
           else "no bootstrap")
    rows = []
    for c in res.contrasts:
        k = c.breakdown_budget
        text = _bound_breakdown("ε", k, res.threshold, "bounds")
        rows.append(TableRow(
            f"discrete bounds: {t.treatment} {format_number(c.level)} vs "
            f"{format_number(c.base)}", words, None, None,
            (c.bounds,) if c.bounds is not None else (),
            (c.ci,) if c.ci is not None else None, res.confidence_level, k, text, t.n, cov,
            CAUTION))
    return rows


def published_rows(res) -> list[TableRow]:
    """The printed estimate; the identified set with the union of intervals and the breakdown;
    the weak-IV-robust set; the prior interval when a prior is given (all from the printed
    numbers, with the approximation they rest on)."""
    from sensiv.sensitivity.bounds import CAUTION

    pct = f"{100 * res.confidence_level:g}%"
    cov = f"from reported numbers ({res.covariance.method})"
    box = res.direct_set
    words = (f"direct effect in [{_end(box.low)}, {_end(box.high)}] (outcome units; given as "
             f"{res.range_text}); {res.approximation}")
    # the curve at zero direct effect is the printed estimate's interval (unbounded when the
    # printed first stage is not significant)
    at_zero = Interval(float(res.curve.lower[0]), float(res.curve.upper[0]))
    rows = [TableRow("printed estimate", "exclusion restriction holds exactly (the printed "
                     f"estimate, its se and {pct} interval)", res.estimate, res.se, None,
                     (at_zero,), res.confidence_level, None, NONE_TEXT, res.reported.n, cov,
                     CAUTION),
            TableRow("direct-effect stress test from printed numbers", words, None, None,
                     (res.identified_set,), (res.union_ci,), res.confidence_level,
                     res.breakdown.scale, _sweep_breakdown(res), res.reported.n, cov, CAUTION),
            TableRow("weak-IV-robust set from printed numbers", words, None, None, None,
                     _pieces(res.ar_set), res.confidence_level, None, NONE_TEXT,
                     res.reported.n, f"{cov}; {res.ar_method}", CAUTION)]
    if res.prior is not None:
        p = res.prior
        method = p.method + ("" if p.mc_error is None else
                             f", Monte Carlo error {format_number(p.mc_error, 3)}")
        rows.append(TableRow("prior interval from printed numbers",
                             f"direct effect ~ {p.law} ({method}); {res.approximation}",
                             p.center, None, None, (p.interval,), res.confidence_level, None,
                             NONE_TEXT, res.reported.n, cov, CAUTION))
    return rows


def calibrate_rows(res) -> list[TableRow]:
    """The scale (reduced form and SDs) of each instrument, one row per covariate benchmark
    and instrument, and the zero-first-stage estimate when there is one.  The estimates are
    direct effects of an instrument on the outcome, not effects of the treatment."""
    from sensiv.sensitivity.calibrate import CAUTION

    s = res.scale
    level = res.confidence_level
    rows = []
    for k, z in enumerate(s.instruments):
        rows.append(TableRow(
            f"calibration scale: reduced form of {z}",
            f"a reference scale, no assumption: a direct effect d of {z} reads as "
            f"d / reduced form or d · SD({z}) / SD({res.outcome}); SD({z}) = "
            f"{_end(float(s.instrument_sd[k]))}, SD({res.outcome}) = {_end(s.outcome_sd)}",
            float(s.reduced_form[k]), None, None, None, level, None, NONE_TEXT, res.n,
            "none (point values)", CAUTION))
    for b in res.benchmarks:
        left = ", ".join(b.columns)
        rows.append(TableRow(
            f"benchmark: {_direct_of(b.instrument)} without {b.name}",
            f"an unobserved direct effect comparable to the shift in the reduced form of "
            f"{b.instrument} when {left} is left out (a judgement, not a test)",
            b.implied_direct, None, None, None, level, None, NONE_TEXT, res.n,
            "none (point values)", CAUTION, b.implied_direct_rf, b.implied_direct_sd,
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
                NONE_TEXT, zfs.n, zfs.se_type, CAUTION, zfs.direct_rf[k], zfs.direct_sd[k],
                f"--prior {zfs.prior_options[k]}; {zfs.sweep_options[k]}"))
    return rows


def _direct_of(instrument: str) -> str:
    """How a calibration row names the instrument whose direct effect it measures."""
    return f"direct effect of {instrument}"


def _bound_breakdown(symbol: str, value: float | None, threshold: float, what: str) -> str:
    theta = format_number(threshold)
    if value is None:
        return f"none for {symbol} ≤ 1 (θ = {theta})"
    if value == 0.0:
        return f"0: no conclusion, the {what} at {symbol} = 0 contain θ = {theta}"
    return f"{symbol} = {format_number(value)} ({what} first contain θ = {theta})"


def _kind(result) -> str:
    """The analysis name of a result object (also the stem of its file names)."""
    from sensiv.sensitivity.bounds import SweepResult
    from sensiv.sensitivity.calibrate import Calibration
    from sensiv.estimation.iv import IVFit
    from sensiv.partial_id.correlation import CorrelationBounds
    from sensiv.partial_id.discrete_results import DiscreteBounds
    from sensiv.sensitivity.prior import PriorResult
    from sensiv.sensitivity.published import PublishedResult

    for cls, name in ((IVFit, "fit"), (SweepResult, "sweep"), (PriorResult, "prior"),
                      (CorrelationBounds, "corrbound"), (DiscreteBounds, "discrete"),
                      (PublishedResult, "published"), (Calibration, "calibrate")):
        if isinstance(result, cls):
            return name
    raise InputError(f"no table or figure for a {type(result).__name__}; give a fit, sweep, "
                     "prior, correlation-bounds, discrete-bounds, published or calibration "
                     "result")


_ROWS = {"fit": fit_rows, "sweep": sweep_rows, "prior": prior_rows,
         "corrbound": corrbound_rows, "discrete": discrete_rows,
         "published": published_rows, "calibrate": calibrate_rows}
_TITLES = {"fit": "2SLS", "sweep": "Direct-effect sensitivity", "prior": "Prior interval",
           "corrbound": "Correlation-restriction bounds", "discrete": "Discrete bounds",
           "published": "Direct-effect stress test from printed numbers",
           "calibrate": "Calibration of direct effects"}
# heading of the assumptions below the table (other kinds: the first row's analysis)
_NOTE_HEADINGS = {"published": "direct-effect stress test from printed numbers",
                  "calibrate": "calibration of direct effects"}


def results_table(results, title: str | None = None) -> Table:
    """One table for one result or several (one or more rows each, in the order given)."""
    results = _as_list(results)
    rows, notes = [], []
    for res in results:
        kind = _kind(res)
        new = _ROWS[kind](res)
        rows += new
        notes.append((_NOTE_HEADINGS.get(kind, new[0].analysis), tuple(res.assumptions())))
    if title is None:
        title = (_TITLES[_kind(results[0])] if len(results) == 1 else
                 "Sensitivity of the estimate to the exclusion restriction")
    return Table(title, tuple(rows), tuple(notes))


def _as_list(results) -> list:
    if isinstance(results, (list, tuple)):
        if not results:
            raise InputError("no results to tabulate; give at least one result")
        return list(results)
    return [results]


# ----------------------------------------------------------------------------- cell text
def _end(value: float) -> str:
    if math.isinf(value):
        return "−∞" if value < 0 else "+∞"
    return format_number(value).replace("-", "−")


def _pieces_text(pieces) -> str:
    if pieces is None:
        return NONE_TEXT
    if not pieces:
        return "empty"
    return " ∪ ".join(f"[{_end(p.low)}, {_end(p.high)}]" for p in pieces)


def _estimate_text(row: TableRow) -> str:
    if row.bounds is not None:
        return _pieces_text(row.bounds)
    if row.estimate is None:
        return NONE_TEXT
    text = _end(row.estimate)
    text += f" ({_end(row.se)})" if row.se is not None else ""
    units = [f"share of reduced form {_end(row.share_rf)}" if row.share_rf is not None
             else None, f"SD units {_end(row.sd_units)}" if row.sd_units is not None else None]
    units = [u for u in units if u]
    return text + (f"; {'; '.join(units)}" if units else "")


def _cells(table: Table) -> tuple[list[str], list[list[str]]]:
    levels = {r.confidence_level for r in table.rows}
    pct = f"{100 * levels.pop():g}% interval" if len(levels) == 1 else None
    header = ["Analysis", "Assumption", "Estimate (se) or bounds", pct or "Interval (level)",
              "Breakdown", "n", "Covariance"]
    body = []
    for r in table.rows:
        interval = _pieces_text(r.interval)
        if pct is None and r.interval is not None:
            interval = f"{100 * r.confidence_level:g}%: {interval}"
        assumption = r.assumption + (f"; suggested: {r.suggestion}" if r.suggestion else "")
        body.append([r.analysis, assumption, _estimate_text(r), interval, r.breakdown_text,
                     NONE_TEXT if r.n is None else str(r.n), r.covariance])
    return header, body


# ----------------------------------------------------------------------------- renderers
def table_markdown(table: Table) -> str:
    """The table in Markdown, with each analysis's assumptions and the caution below it."""
    header, body = _cells(table)
    parts = [f"## {table.title}\n\n", markdown_table(header, body), "\n"]
    for heading, lines in table.notes:
        parts.append(f"**Assumptions — {heading}:**\n\n" + "".join(f"- {a}\n" for a in lines)
                     + "\n")
    parts += [f"> {c}\n>\n" for c in table.cautions[:-1]]
    parts.append(f"> {table.cautions[-1]}\n")
    return "".join(parts)


_LATEX_TEXT = {
    "\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#", "_": r"\_",
    "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}", "^": r"\textasciicircum{}",
    "–": "--", "—": "---", "′": "'",
}
_LATEX_MATH = {
    "|": "|", "<": "<", ">": ">", "γ": r"\gamma", "β": r"\beta", "θ": r"\theta",
    "ε": r"\varepsilon", "≤": r"\le", "≥": r"\ge", "∈": r"\in", "−": "-", "∪": r"\cup",
    "±": r"\pm", "×": r"\times", "·": r"\cdot", "∞": r"\infty", "²": "^2", "→": r"\to",
    "r\u0304": r"\bar{r}",
}


def latex_escape(text: str) -> str:
    r"""Text safe inside a LaTeX table cell: special characters escaped, Greek letters and
    symbols set as math (neighbouring symbols share one ``$…$``).

    Examples
    --------
    >>> print(latex_escape("height_m & 5% ≤ ε, |corr| ≤ r̄·2"))
    height\_m \& 5\% $\le$ $\varepsilon$, $|$corr$|$ $\le$ $\bar{r} \cdot$2

    A typed option keeps both hyphens (``--`` would become an en dash):

    >>> print(latex_escape("--direct=-0.1:0.1"))
    -{}-direct=-0.1:0.1
    """
    out: list[str] = []
    math_run: list[str] = []
    i = 0
    while i < len(text):
        pair = text[i:i + 2]
        if pair in _LATEX_MATH:
            math_run.append(_LATEX_MATH[pair])
            i += 2
            continue
        ch = text[i]
        if ch in _LATEX_MATH:
            math_run.append(_LATEX_MATH[ch])
        else:
            if math_run:
                out.append("$" + " ".join(math_run) + "$")
                math_run = []
            out.append("-{}" if text[i:i + 2] == "--" else _LATEX_TEXT.get(ch, ch))
        i += 1
    if math_run:
        out.append("$" + " ".join(math_run) + "$")
    return "".join(out)


LATEX_COLUMNS = (r">{\raggedright\arraybackslash}p{0.15\linewidth}"
                 r">{\raggedright\arraybackslash}p{0.22\linewidth}ll"
                 r">{\raggedright\arraybackslash}p{0.13\linewidth}r"
                 r">{\raggedright\arraybackslash}p{0.09\linewidth}")


def table_latex(table: Table) -> str:
    """The table as a booktabs ``tabular`` ready to ``\\input`` (needs the booktabs and
    array packages), followed by the caution as a small paragraph."""
    header, body = _cells(table)
    lines = [f"% {latex_escape(table.title)} (written by sensiv; regenerate rather than edit)",
             r"% needs \usepackage{booktabs} and \usepackage{array}",
             r"\begin{tabular}{" + LATEX_COLUMNS + "}", r"\toprule",
             " & ".join(latex_escape(h) for h in header) + r" \\", r"\midrule"]
    lines += [" & ".join(latex_escape(c) for c in row) + r" \\" for row in body]
    lines += [r"\bottomrule", r"\end{tabular}", r"\par\smallskip",
              r"{\footnotesize " + " ".join(latex_escape(c) for c in table.cautions)
              + r"\par}"]
    return "\n".join(lines) + "\n"


def _csv_number(value: float | None) -> str:
    if value is None:
        return ""
    if math.isinf(value):
        return "-inf" if value < 0 else "inf"
    return repr(float(value))


def _hull(pieces) -> tuple[float | None, float | None]:
    if not pieces:
        return None, None
    return pieces[0].low, pieces[-1].high


def _ascii_pieces(pieces) -> str:
    if pieces is None:
        return ""
    if not pieces:
        return "empty"
    return " U ".join(f"[{_csv_number(p.low)}, {_csv_number(p.high)}]" for p in pieces)


def table_csv(table: Table) -> str:
    """One line per row with machine-readable numbers (``inf`` for an unbounded end, empty
    for not available; unions of intervals in full in the ``*_pieces`` columns)."""
    import csv
    import io

    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(CSV_COLUMNS)
    for r in table.rows:
        b_lo, b_hi = _hull(r.bounds)
        i_lo, i_hi = _hull(r.interval)
        writer.writerow([r.analysis, r.assumption, _csv_number(r.estimate), _csv_number(r.se),
                         _csv_number(b_lo), _csv_number(b_hi), _ascii_pieces(r.bounds),
                         _csv_number(i_lo), _csv_number(i_hi), _ascii_pieces(r.interval),
                         repr(r.confidence_level), _csv_number(r.breakdown),
                         "" if r.breakdown_text == NONE_TEXT else r.breakdown_text,
                         "" if r.n is None else r.n, r.covariance, r.caution,
                         _csv_number(r.share_rf), _csv_number(r.sd_units), r.suggestion or ""])
    return buffer.getvalue()


def table_json(table: Table) -> str:
    """The table as one JSON document (``null`` for an infinite end or a missing value;
    ``bounds``/``interval`` as lists of ``[low, high]`` pieces, ``null`` when not
    applicable; ``share_of_reduced_form``, ``sd_units`` and ``suggestion`` filled on
    calibration rows only)."""
    def pieces(p):
        return None if p is None else intervals_to_lists(tuple(p))

    rows = [{"analysis": r.analysis, "assumption": r.assumption,
             "estimate": json_number(r.estimate), "se": json_number(r.se),
             "bounds": pieces(r.bounds), "interval": pieces(r.interval),
             "confidence_level": r.confidence_level, "breakdown": json_number(r.breakdown),
             "breakdown_meaning": None if r.breakdown_text == NONE_TEXT else r.breakdown_text,
             "n": r.n, "covariance": r.covariance,
             "caution": r.caution, "share_of_reduced_form": json_number(r.share_rf),
             "sd_units": json_number(r.sd_units), "suggestion": r.suggestion}
            for r in table.rows]
    return to_json({"title": table.title, "rows": rows,
                    "assumptions": {h: list(lines) for h, lines in table.notes},
                    "caution": list(table.cautions)})


def table_files(results, stem: str | None = None) -> dict[str, str]:
    """``{stem}-table.md/.tex/.csv/.json`` for one result or several (``stem`` defaults to
    the analysis name, or ``summary`` for several), ready for :func:`write_bundle`."""
    items = _as_list(results)
    table = results_table(items)
    stem = stem or (_kind(items[0]) if len(items) == 1 else "summary")
    return {f"{stem}-table.md": table_markdown(table), f"{stem}-table.tex": table_latex(table),
            f"{stem}-table.csv": table_csv(table), f"{stem}-table.json": table_json(table)}


# ----------------------------------------------------------------------------- figure files
def _figures(result, note):
    from sensiv.analyses.summary_rows import summary_rows, summary_threshold, summary_xlabel
    from sensiv.present import figures

    kind = _kind(result)
    if kind == "fit":
        return {"summary": figures.summary_intervals(
            summary_rows([result]), threshold=summary_threshold([result]),
            xlabel=summary_xlabel([result]), note=note)}
    if kind == "sweep":
        out = {"curve": figures.sensitivity_curve(result, note=note)}
        if result.frontier is not None:
            out["frontier"] = figures.breakdown_frontier(result, note=note)
        return out
    if kind == "prior":
        return ({"map": figures.prior_map(result, note=note)}
                if result.prior_map is not None else {})
    if kind == "corrbound":
        return {"curve": figures.correlation_curve(result, note=note)}
    if kind == "published":
        out = {"curve": figures.sensitivity_curve(result, note=note)}
        if result.frontier is not None:
            out["frontier"] = figures.breakdown_frontier(result, note=note)
        return out
    if kind == "calibrate":
        return ({"benchmarks": figures.calibration_benchmarks(result, note=note)}
                if result.benchmarks or result.zero_first_stage is not None else {})
    return {"curve": figures.discrete_curve(result, note=note)}


def figure_files(results, formats=("png",), *, note: str | None = None) -> dict[str, bytes]:
    """Every figure of one result or several as ``{stem}-{figure}.{format}`` → bytes, plus
    ``summary-intervals.*`` for several; ready for :func:`write_bundle`.

    Stems: ``sweep-curve``/``-frontier``, ``prior-map``, ``corrbound-curve``,
    ``discrete-curve``, ``fit-summary``, ``published-curve``/``-frontier`` and
    ``calibrate-benchmarks`` (a second result of a kind gets ``sweep2-…`` and so on).  A
    calibration bounds no effect of the treatment, so it adds no row to the summary figure.
    ``note`` is added to every caption (e.g. "Invented demo data").  The same results give
    the same bytes.
    """
    from sensiv.analyses.summary_rows import summary_rows, summary_threshold, summary_xlabel
    from sensiv.present import figures

    items = _as_list(results)
    files: dict[str, bytes] = {}
    seen: dict[str, int] = {}
    for res in items:
        kind = _kind(res)
        seen[kind] = seen.get(kind, 0) + 1
        stem = kind if seen[kind] == 1 else f"{kind}{seen[kind]}"
        for name, fig in _figures(res, note).items():
            for fmt, data in figures.save_figure(fig, formats).items():
                files[f"{stem}-{name}.{fmt}"] = data
    effects = [res for res in items if _kind(res) != "calibrate"]
    if len(items) > 1 and effects:
        fig = figures.summary_intervals(summary_rows(effects),
                                        threshold=summary_threshold(effects),
                                        xlabel=summary_xlabel(effects), note=note)
        for fmt, data in figures.save_figure(fig, formats).items():
            files[f"summary-intervals.{fmt}"] = data
    return files
