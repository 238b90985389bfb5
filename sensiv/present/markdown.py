"""The per-command Markdown reports (``fit.md``, ``sweep.md``, ``prior.md``, ``discrete.md``)
and the sweep's ``curve.csv``: formatting only, every number read from a result object."""

from __future__ import annotations

from sensiv.core import labels
from sensiv.core.results import format_number
from sensiv.estimation import iv
from sensiv.partial_id.discrete_data import plain_number
from sensiv.present.text_clusters import cluster_count_text
from sensiv.present.writer import to_json
from sensiv.present.tables import markdown_table
from sensiv.present.text_at import at_cells, at_heading
from sensiv.present.text_bias_aware import bias_aware_cells, optimal_cells, shown_optimal
from sensiv.present.text_units import units_cells
from sensiv.sensitivity import bounds, prior
from sensiv.sensitivity.breakdown_units import curve_units


def fit_markdown(fit) -> str:
    """Markdown report of a 2SLS fit: coefficients, first stages, AR set, overid, assumptions."""
    pct = f"{100 * fit.confidence_level:g}%"
    rows = []
    for name in fit.reported_names():
        ci = fit.conf_int(name)
        rows.append([name, format_number(fit.tsls.value(name)),
                     format_number(fit.tsls.std_error(name)), str(ci),
                     format_number(fit.ols.value(name)),
                     format_number(fit.ols.std_error(name))])
    parts = [
        f"# 2SLS: {labels.name(fit.outcome)} on {', '.join(map(labels.name, fit.treatments))}\n",
        f"Instruments: {', '.join(map(labels.name, fit.instruments))}. Controls: "
        f"{', '.join(map(labels.name, fit.controls)) or 'none'}"
        f"{' and a constant' if fit.constant else ''}. n = {fit.n} "
        f"({fit.n_dropped} rows dropped for missing values"
        f"{f'; {fit.n_filtered} filtered out by the row filter {fit.where!r}' if fit.where else ''}"
        f"). Covariance: {fit.se_type}"
        f"{' with small-sample corrections' if fit.small else ''}"
        f"{f', {cluster_count_text(fit)} clusters' if fit.n_clusters is not None else ''}.\n",
        markdown_table(["coefficient", "2SLS", "se", f"{pct} CI", "OLS", "OLS se"], rows),
        "\n## First stage\n",
        markdown_table(
            ["treatment", "instrument", "coef", "se", "F", "partial R²", "effective F"],
            [[fs.treatment, inst, format_number(fs.coef[inst]), format_number(fs.se[inst]),
              format_number(fs.f), format_number(fs.partial_r2, 4),
              format_number(fs.effective_f) if fs.effective_f is not None else "n/a"]
             for fs in fit.first_stages for inst in fit.instruments]),
    ]
    if fit.ar_set is not None:
        pieces = " ∪ ".join(str(p) for p in fit.ar_set) if fit.ar_set else "empty"
        parts.append(f"\nAnderson–Rubin {pct} confidence set for {fit.treatments[0]}: "
                     f"{pieces}\n")
    if fit.overid is not None:
        o = fit.overid
        parts.append(f"\nOveridentification test ({o.name}): {format_number(o.stat)} on "
                     f"{o.df} df, p = {format_number(o.p_value, 3)}\n")
    for note in fit.notes:
        parts.append(f"\n**Warning:** {note}\n")
    parts.append("\n## Assumptions\n\n" + "\n".join(f"- {a}" for a in fit.assumptions()) + "\n")
    parts.append(f"\n> {iv.CAUTION}\n")
    return "".join(parts)


def sweep_markdown(res) -> str:
    """Markdown report of a direct-effect sweep."""
    pct = f"{100 * res.confidence_level:g}%"
    b = res.breakdown
    scale = "never (within 1000x)" if b.scale is None else format_number(b.scale)
    rows = [
        ["2SLS at zero direct effect", f"{format_number(res.estimate)} (se "
                                       f"{format_number(res.se)})"],
        ["identified set", str(res.identified_set)],
        [f"union of {pct} intervals", str(res.union_ci)],
        *(bias_aware_cells(res.bias_aware, res.confidence_level)
          if res.bias_aware is not None else []),
        *(optimal_cells(shown_optimal(res), res.confidence_level)
          if shown_optimal(res) is not None else []),
        [f"weak-IV-robust {pct} set", " ∪ ".join(str(p) for p in res.ar_set)
         if res.ar_set else ("empty" if res.ar_set is not None else "n/a")],
        ["conclusion examined", b.conclusion],
        ["breakdown scale of the set", scale],
    ]
    if res.bias_aware is not None:
        t = b.bias_aware_scale
        rows.append(["bias-aware breakdown scale of the set",
                     "never (within 1000x)" if t is None else format_number(t)])
    rows += units_cells(b.direct_units, "breakdown")
    if res.bias_aware is not None:
        rows += units_cells(b.bias_aware_units, "bias-aware breakdown")
    for z, lo, hi in zip(res.instruments, b.direct_lower, b.direct_upper):
        rows.append([f"interval reaches θ = {format_number(b.threshold)}, {z} alone",
                     f"{'none' if lo is None else format_number(lo)} / "
                     f"{'none' if hi is None else format_number(hi)}"])
    ranges = markdown_table(
        ["instrument", "outcome units", "share of reduced form", "SD units"],
        [[z, str(a), str(r), str(s)] for z, a, r, s in
         zip(res.instruments, res.direct_set, res.direct_set_rf, res.direct_set_sd)])
    notes = "".join(f"\n**Warning:** {n}\n" for n in res.notes)
    at = (f"\n## {at_heading(res)}\n\n{markdown_table(*at_cells(res))}" if res.at else "")
    return (f"# Direct-effect sensitivity: {labels.name(res.focus)} → "
            f"{labels.name(res.outcome)}\n\n"
            f"n = {res.n}, covariance: {res.se_type}.\n\n## Assumed direct effects\n\n{ranges}\n"
            f"## Results\n\n{markdown_table(['quantity', 'value'], rows)}{notes}{at}\n"
            "## Assumptions\n\n" + "\n".join(f"- {a}" for a in res.assumptions())
            + f"\n\n> {bounds.CAUTION}\n")


def curve_csv(res) -> str:
    """The sensitivity curve as CSV: the scale of the set, the direct effect it stands for
    (largest absolute value per instrument, in outcome units, as a share of the reduced form
    and in outcome SDs per instrument SD: ``direct``, ``direct_rf``, ``direct_sd``, suffixed
    ``_<instrument>`` with several instruments), union interval, identified set, bias-aware
    interval."""
    keys = ("scale", "lower", "upper", "id_lower", "id_upper", "ba_lower", "ba_upper")
    names = res.instruments
    suffixes = [""] if len(names) == 1 else [f"_{z}" for z in names]
    unit_keys = [f"direct{u}{s}" for u in ("", "_rf", "_sd") for s in suffixes]
    s = res.scale
    units = curve_units(res.curve.scale, res.direct_set, s.reduced_form, s.outcome_sd,
                        s.instrument_sd)
    lines = [",".join([keys[0], *unit_keys, *keys[1:]])]
    for row, (outcome, rf, sd) in zip(res.curve.to_list(), units):
        cells = ["" if row.get(k) is None else repr(float(row[k])) for k in keys]
        unit_cells = ["" if v is None else repr(float(v)) for v in (*outcome, *rf, *sd)]
        lines.append(",".join([cells[0], *unit_cells, *cells[1:]]))
    return "\n".join(lines) + "\n"


def sweep_files(res) -> dict[str, str]:
    return {"sweep.json": to_json(labels.document(res.to_dict())), "sweep.md": sweep_markdown(res),
            "curve.csv": curve_csv(res)}


def prior_markdown(res) -> str:
    pct = f"{100 * res.confidence_level:g}%"
    rows = [["2SLS at zero direct effect", f"{format_number(res.estimate)} (se "
                                           f"{format_number(res.se)})"],
            [f"{pct} prior interval", str(res.interval)],
            ["center", format_number(res.center)],
            ["method", res.method],
            ["Monte Carlo error", "n/a" if res.mc_error is None else format_number(res.mc_error,
                                                                                   3)]]
    return (f"# Prior interval: {labels.name(res.focus)} → {labels.name(res.outcome)}\n\n"
            + markdown_table(["quantity", "value"], rows)
            + "\n## Assumptions\n\n" + "\n".join(f"- {a}" for a in res.assumptions())
            + f"\n\n> {prior.CAUTION}\n")


def prior_files(res) -> dict[str, str]:
    return {"prior.json": to_json(labels.document(res.to_dict())), "prior.md": prior_markdown(res)}


def discrete_markdown(result) -> str:
    """Markdown report of a discrete-bounds result (formatting only)."""

    t = result.table
    pct = f"{100 * result.confidence_level:g}%"

    def number(value) -> str:
        return format_number(value) if value is not None else "n/a"

    rows = [[f"{plain_number(c.level)} vs {plain_number(c.base)}",
             str(c.bounds) if c.bounds is not None else "empty (no fit)",
             str(c.ci) if c.ci is not None else "n/a",
             number(c.breakdown_budget) if c.breakdown_budget is not None else "never"]
            for c in result.contrasts]
    ineq = result.inequality
    parts = [
        f"# Discrete bounds: {labels.name(t.treatment)} on {labels.name(t.outcome)}, instrument "
        f"{labels.name(t.instrument)}\n\n",
        f"Data: {t.description}, n = {t.n} ({t.n_dropped} rows dropped for missing values). "
        f"Estimand: {result.estimand()}. Budget: {result.budget:g}"
        + (f"; monotone with defier budget {result.defier_budget:g}" if result.monotone
           else "") + ".\n\n",
        markdown_table(["contrast", "bounds", f"{pct} CI",
                        f"breakdown budget (θ₀ = {result.threshold:g})"], rows),
        f"\nInstrumental inequality (Pearl 1995): {ineq.value:.4g} — "
        f"{'holds' if ineq.holds else 'fails'}. Smallest budget that fits the data: "
        f"{number(result.min_budget) if result.min_budget is not None else 'none'}.\n",
    ]
    if result.bootstrap is not None:
        b = result.bootstrap
        parts.append(f"\nBootstrap: {b.reps} replicates (seed {b.seed}); {b.used} used, "
                     f"{b.infeasible} without a fit, {b.skipped} skipped.\n")
    parts.append("\n## Curve\n\n")
    parts.append(markdown_table(
        ["budget", "lower", "upper"],
        [[format_number(p.budget), number(p.bounds.low if p.bounds else None),
          number(p.bounds.high if p.bounds else None)] for p in result.curve]))
    parts += [f"\n**Note:** {note}\n" for note in result.notes]
    parts.append("\n## Assumptions\n\n" + "\n".join(f"- {a}" for a in result.assumptions())
                 + "\n")
    parts.append(f"\n> {result.caution}\n")
    return "".join(parts)
