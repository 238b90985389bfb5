"""Tables and output bundles (formatting and writing only; nothing new is computed here).

Files are written atomically: everything goes to a temporary folder beside the target first and
is moved into place only when every file has been written, so a failure leaves no half-written
output behind.
"""

from __future__ import annotations

import json
import os
import shutil
import tempfile
from collections.abc import Mapping
from pathlib import Path

from sensiv.results import format_number


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
    from sensiv.iv import CAUTION

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
    write succeeded are they moved into place.  Returns the final paths.
    """
    target = Path(directory)
    parent = target.resolve().parent
    parent.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=f".{target.name}-", dir=parent))
    try:
        for name, content in files.items():
            path = staging / name
            if isinstance(content, bytes):
                path.write_bytes(content)
            else:
                path.write_text(content, encoding="utf-8")
        target.mkdir(parents=True, exist_ok=True)
        out = []
        for name in files:
            final = target / name
            os.replace(staging / name, final)
            out.append(final)
        return out
    finally:
        shutil.rmtree(staging, ignore_errors=True)


def _interval_row(label: str, interval) -> list[str]:
    return [label, str(interval)]


def sweep_markdown(res) -> str:
    """Markdown report of a direct-effect sweep."""
    from sensiv.bounds import CAUTION

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
    from sensiv.bounds import CAUTION

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
