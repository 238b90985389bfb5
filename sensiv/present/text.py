"""Readable plain-text summaries of result objects (formatting only, no new statistics)."""

from __future__ import annotations

from sensiv.core import labels
from sensiv.core.results import format_number
from sensiv.present.tables import table_cells
from sensiv.present.text_clusters import cluster_count_text
from sensiv.present.text_fit_extras import bootstrap_lines, tf_lines
from sensiv.present.text_bias_aware import (bias_aware_breakdown, bias_aware_line,
                                            optimal_line, shown_optimal)
from sensiv.present.text_levels import absorbed_line, listed_names
from sensiv.present.text_at import at_cells, at_heading
from sensiv.present.text_units import breakdown_sentence, crossing_lines
from sensiv.sensitivity import bounds, prior


def _table(header: list[str], rows: list[list[str]], text: frozenset[int] = frozenset({0})
           ) -> list[str]:
    """Columns padded to their widths: the ``text`` columns flush left, numbers flush right."""
    widths = [max(len(r[j]) for r in [header, *rows]) for j in range(len(header))]

    def line(cells: list[str]) -> str:
        return "  ".join(c.ljust(w) if j in text else c.rjust(w)
                         for j, (c, w) in enumerate(zip(cells, widths))).rstrip()

    return [line(header), "-" * (sum(widths) + 2 * len(widths) - 2), *map(line, rows)]


def fit_summary(fit) -> str:
    """Text table of a :class:`sensiv.estimation.iv.IVFit`: 2SLS beside OLS, first stages, AR
    set, overidentification."""
    pct = f"{100 * fit.confidence_level:g}%"
    se_label = fit.se_type + (", small-sample" if fit.small else "")
    lines = [
        f"2SLS of {labels.name(fit.outcome)} on {', '.join(map(labels.name, fit.treatments))} "
        f"(instruments: {', '.join(map(labels.name, fit.instruments))})",
        f"n = {fit.n} (dropped {fit.n_dropped} with missing values"
        + (f"; {fit.n_filtered} filtered out by {fit.where!r}" if fit.where else "") + ")"
        + (f", clusters = {cluster_count_text(fit)}" if fit.n_clusters is not None else "")
        + f", covariance: {se_label}" + (", weighted" if fit.weighted else ""),
        "",
    ]
    rows = []
    names, level_notes = listed_names(fit)
    for name in names:
        ci = fit.conf_int(name)
        rows.append([name, format_number(fit.tsls.value(name)),
                     format_number(fit.tsls.std_error(name)),
                     f"[{format_number(ci.low)}, {format_number(ci.high)}]",
                     format_number(fit.ols.value(name)), format_number(fit.ols.std_error(name))])
    lines += _table(["coefficient", "2SLS", "se", f"{pct} CI", "OLS", "OLS se"], rows)
    lines += level_notes + ([absorbed_line(fit)] if absorbed_line(fit) else [])
    lines.append("")
    lines.append("First stage (controls partialled out)")
    rows = [[fs.treatment, inst, format_number(fs.coef[inst]), format_number(fs.se[inst])]
            for fs in fit.first_stages for inst in fit.instruments]
    lines += _table(["treatment", "instrument", "coef", "se"], rows)
    for fs in fit.first_stages:
        eff = (f", effective F = {format_number(fs.effective_f, 4)}"
               if fs.effective_f is not None else "")
        lines.append(f"  {fs.treatment}: F = {format_number(fs.f, 4)} "
                     f"(p = {format_number(fs.f_p_value, 3)}), partial R2 = "
                     f"{format_number(fs.partial_r2, 3)}{eff}")
    if fit.ar_set is not None:
        pieces = " U ".join(str(p) for p in fit.ar_set) if fit.ar_set else "empty"
        lines += ["", f"Anderson-Rubin {pct} set for {fit.treatments[0]}: {pieces}"]
    lines += tf_lines(fit)
    if fit.overid is not None:
        o = fit.overid
        lines.append(f"Overidentification ({o.name}): {format_number(o.stat, 4)} "
                     f"on {o.df} df, p = {format_number(o.p_value, 3)}")
    else:
        lines.append("Overidentification: not testable (exactly identified)")
    lines += bootstrap_lines(fit)
    for note in fit.notes:
        lines += ["", "Warning: " + note]
    lines += ["", "Assumptions:"] + [f"  - {a}" for a in fit.assumptions()]
    lines += ["", fit.caution]
    return "\n".join(lines)


def _pieces(pieces) -> str:
    if pieces is None:
        return "n/a"
    return " U ".join(str(p) for p in pieces) if pieces else "empty"


def sweep_summary(res) -> str:
    """Text summary of a :class:`sensiv.sensitivity.bounds.SweepResult`."""
    pct = f"{100 * res.confidence_level:g}%"
    b = res.breakdown
    lines = [
        f"Direct-effect sensitivity of the {labels.effect_words(res.focus, res.outcome)} "
        f"(n = {res.n}, covariance: {res.se_type})",
        f"2SLS at zero direct effect: {format_number(res.estimate)} "
        f"(se {format_number(res.se)})",
        "",
        "Assumed direct effects (outcome units | share of reduced form | outcome SD per "
        "instrument SD):",
    ]
    for z, a, r, s in zip(res.instruments, res.direct_set, res.direct_set_rf, res.direct_set_sd):
        lines.append(f"  {labels.name(z)}: {a} | {r} | {s}")
    lines += [
        "",
        f"Identified set (no sampling error):    {res.identified_set}",
        f"Union of {pct} intervals over the set: {res.union_ci}",
        *([bias_aware_line(res.bias_aware, res.confidence_level)]
          if res.bias_aware is not None else []),
        *([optimal_line(shown_optimal(res), res.confidence_level)]
          if shown_optimal(res) is not None else []),
        f"Weak-instrument-robust {pct} set:      {_pieces(res.ar_set)}"
        + (f" ({res.ar_method})" if res.ar_method else ""),
        "",
        f"Conclusion examined: {labels.leading(b.conclusion, res.focus)}",
        "Breakdown: " + breakdown_sentence(b.scale, b.direct_units, outcome=res.outcome),
    ]
    lines += crossing_lines(res.instruments, b)
    if res.bias_aware is not None:
        lines.append("Bias-aware breakdown: "
                     + bias_aware_breakdown(b.bias_aware_scale, units=b.bias_aware_units,
                                          outcome=res.outcome))
    if res.at:
        lines += ["", at_heading(res) + ":", *_table(*at_cells(res))]
    if res.fit.overid is not None:
        o = res.fit.overid
        lines.append(f"Overidentification ({o.name}): {format_number(o.stat, 4)} on {o.df} df, "
                     f"p = {format_number(o.p_value, 3)}")
    if res.adaptive is not None:
        lines += ["", str(res.adaptive)]
    for note in res.notes:
        lines += ["", "Warning: " + note]
    lines += ["", "Assumptions:"] + [f"  - {a}" for a in res.assumptions()]
    lines += ["", bounds.CAUTION]
    return "\n".join(lines)


def prior_summary(res) -> str:
    """Text summary of a :class:`sensiv.sensitivity.prior.PriorResult`."""
    pct = f"{100 * res.confidence_level:g}%"
    lines = [
        f"Prior interval for the {labels.effect_words(res.focus, res.outcome)} "
        f"(n = {res.n}, covariance: {res.se_type})",
        f"2SLS at zero direct effect: {format_number(res.estimate)} "
        f"(se {format_number(res.se)})",
        "Prior: " + "; ".join(f"{labels.name(z)} ~ {p}"
                              for z, p in zip(res.instruments, res.priors)),
        "",
        f"{pct} prior interval: {res.interval}  (center {format_number(res.center)}, "
        f"method: {res.method}"
        + (f", Monte Carlo error {format_number(res.mc_error, 2)}, {res.draws} draws, seed "
           f"{res.seed}" if res.mc_error is not None else "") + ")",
    ]
    if res.fit.overid is not None:
        o = res.fit.overid
        lines.append(f"Overidentification ({o.name}): {format_number(o.stat, 4)} on {o.df} df, "
                     f"p = {format_number(o.p_value, 3)}")
    for note in res.notes:
        lines += ["", "Warning: " + note]
    lines += ["", "Assumptions:"] + [f"  - {a}" for a in res.assumptions()]
    lines += ["", prior.CAUTION]
    return "\n".join(lines)


def text_table(table) -> str:
    """A results table (:class:`~sensiv.present.tables.Table`) as plain text for the terminal:
    analysis,
    estimate or bounds, interval and breakdown (assumptions are in the report)."""
    header, rows = table_cells(table)
    keep = [0, 2, 3, 4]
    return "\n".join(_table([header[j] for j in keep], [[r[j] for j in keep] for r in rows],
                            text=frozenset({0, 3})))
