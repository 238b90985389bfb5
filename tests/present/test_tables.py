"""Result tables (Markdown, LaTeX, CSV, JSON) and the figure/table file dicts.

Sources: common practice, no source (structure of booktabs tables, CSV and JSON round trips);
every number in a table is compared with the result object it was read from.
"""

from __future__ import annotations

import csv
import io
import json
import math
import re
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from sensiv.sensitivity import bounds, prior
from sensiv.estimation import iv
from sensiv.analyses import outputs, registry
from sensiv.present import markdown, table_rows, tables, writer
from sensiv.data import Spec
from sensiv.core.errors import InputError
from sensiv.partial_id.correlation import correlation_bounds
from sensiv.partial_id.discrete import discrete_bounds
from sensiv.partial_id.discrete_data import from_counts
from sensiv.core.results import Interval


def design(n=300, seed=11, strength=0.8):
    rng = np.random.default_rng(seed)
    z = rng.normal(size=n)
    w = rng.normal(size=n)
    v = rng.normal(size=n)
    x = strength * z + 0.5 * w + v
    y = 1.0 + 0.5 * x + 0.3 * w + 0.6 * v + rng.normal(size=n)
    # names with underscores and a percent sign exercise the LaTeX escaping
    frame = pd.DataFrame({"yield_t": y, "hours_%": x, "w_1": w, "height_m": z,
                          "g": rng.integers(0, 20, n)})
    return frame, Spec("yield_t", ["hours_%"], ["height_m"], controls=["w_1"], cluster="g")


@pytest.fixture(scope="module")
def results():
    frame, spec = design()
    weak, _ = design(strength=0.0, seed=3)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return {
            "fit": iv.fit(frame, spec),
            "sweep": bounds.sweep(frame, spec, direct=["-0.2:0.2"]),
            "weak": bounds.sweep(weak, spec, direct=["-0.1:0.1"]),
            "prior": prior.prior_analysis(frame, spec, priors=["normal:0:0.1"]),
            "corrbound": correlation_bounds(frame, spec, max_ratio=1.0, reps=20, seed=3,
                                            points=5, progress=False),
            "discrete": discrete_bounds(from_counts([[[300, 60], [20, 20]],
                                                     [[60, 40], [40, 380]]],
                                                    instrument="sms_sent"),
                                        budget=0.1, reps=20, seed=2, points=5,
                                        progress=False),
        }


KINDS = ["fit", "sweep", "weak", "prior", "corrbound", "discrete"]


def all_results(results):
    return [results[k] for k in KINDS]


# ----------------------------------------------------------------------------- rows
def test_rows_read_numbers_from_the_results(results):
    fit, sweep, pri = results["fit"], results["sweep"], results["prior"]
    corr, disc = results["corrbound"], results["discrete"]
    (tsls, ar) = table_rows.fit_rows(fit)
    assert tsls.estimate == fit.tsls.value("hours_%") and tsls.se == fit.tsls.std_error(
        "hours_%")
    assert tsls.interval == (fit.conf_int("hours_%"),) and ar.interval == fit.ar_set
    assert tsls.n == fit.n and tsls.covariance == "cluster, 20 clusters"
    row = table_rows.sweep_rows(sweep)[0]
    assert row.bounds == (sweep.identified_set,) and row.interval == (sweep.union_ci,)
    assert row.breakdown == sweep.breakdown.scale
    bias = table_rows.sweep_rows(sweep)[1]
    assert bias.interval == (sweep.bias_aware.ci,) and bias.se == sweep.bias_aware.se
    assert bias.breakdown == sweep.breakdown.bias_aware_scale
    assert "bias-aware" in bias.analysis and sweep.bias_aware.centre in bias.analysis
    (row,) = table_rows.prior_rows(pri)
    assert row.estimate == pri.center and row.interval == (pri.interval,)
    (row,) = table_rows.corrbound_rows(corr)
    assert row.bounds == corr.pieces and row.breakdown == corr.breakdown_ratio
    (row,) = table_rows.discrete_rows(disc)
    assert row.bounds == (disc.bounds,) and row.interval == (disc.ci,)
    assert row.breakdown == disc.breakdown_budget and row.n == disc.table.n


def test_unbounded_union_is_kept_unbounded(results):
    row = table_rows.sweep_rows(results["weak"])[0]
    assert row.interval == (results["weak"].union_ci,)
    assert math.isinf(row.interval[0].low)
    text = tables.table_markdown(outputs.results_table(results["weak"]))
    assert "[−∞, +∞]" in text
    doc = json.loads(tables.table_json(outputs.results_table(results["weak"])))
    assert doc["rows"][0]["interval"] == [[None, None]]
    lines = list(csv.DictReader(io.StringIO(tables.table_csv(
        outputs.results_table(results["weak"])))))
    assert lines[0]["interval_lower"] == "-inf" and lines[0]["interval_upper"] == "inf"


def test_unknown_result_is_refused():
    with pytest.raises(InputError, match="no table or figure for a dict"):
        outputs.results_table({"a": 1})
    with pytest.raises(InputError, match="at least one"):
        outputs.table_files([])


# ----------------------------------------------------------------------------- formats
def latex_columns(spec: str) -> int:
    spec = re.sub(r">\{[^{}]*\}", "", spec)        # column prefixes
    spec = re.sub(r"[pmb]\{[^{}]*\}", "p", spec)   # paragraph columns with widths
    return len(re.findall(r"[lcrp]", spec))


def test_latex_table_is_structurally_sound(results):
    tex = tables.table_latex(outputs.results_table(all_results(results)))
    assert tex.count(r"\begin{tabular}") == tex.count(r"\end{tabular}") == 1
    for rule in (r"\toprule", r"\midrule", r"\bottomrule"):
        assert tex.count(rule) == 1
    spec = re.search(r"\\begin\{tabular\}\{(.*)\}\n", tex).group(1)
    ncol = latex_columns(spec)
    assert ncol == len(tables.COLUMNS)
    body = tex[tex.index(r"\toprule"):tex.index(r"\bottomrule")]
    rows = [line for line in body.splitlines() if line.endswith(r"\\")]
    assert len(rows) == 1 + sum(len(outputs.results_table(r).rows)
                                for r in all_results(results))
    for line in rows:
        assert len(re.findall(r"(?<!\\)&", line)) == ncol - 1, line
    # special characters escaped: no bare _ % & outside escapes, maths balanced
    cells = "\n".join(rows)
    assert r"hours\_\%" in cells and r"height\_m" in cells and r"sms\_sent" in cells
    assert not re.search(r"(?<!\\)[_%]", cells.replace(r"\_", "").replace(r"\%", ""))
    assert all(line.count("$") % 2 == 0 for line in tex.splitlines() if not
               line.startswith("%"))
    assert "do not prove" in tex or "does not prove" in tex


def test_latex_escape():
    assert tables.latex_escape("a_b 5% & #1 {x} ~ ^") == \
        r"a\_b 5\% \& \#1 \{x\} \textasciitilde{} \textasciicircum{}"
    assert tables.latex_escape("γ ∈ [−0.1, 0.1]") == r"$\gamma$ $\in$ [$-$0.1, 0.1]"
    assert tables.latex_escape("r̄·2") == r"$\bar{r} \cdot$2"
    assert tables.latex_escape("$5") == r"\$5"


def markdown_row_cells(line: str) -> int:
    return len(re.findall(r"(?<!\\)\|", line)) - 1


def test_markdown_table_has_consistent_columns(results):
    md = tables.table_markdown(outputs.results_table(all_results(results)))
    lines = [line for line in md.splitlines() if line.startswith("|")]
    counts = {markdown_row_cells(line) for line in lines}
    assert counts == {len(tables.COLUMNS)}
    assert md.count("\n> Caution") + md.startswith("> Caution") >= 1
    assert "**Assumptions — direct-effect sweep: hours_%:**" in md


def test_csv_round_trip(results):
    table = outputs.results_table(all_results(results))
    text = tables.table_csv(table)
    reader = list(csv.reader(io.StringIO(text)))
    assert tuple(reader[0]) == tables.CSV_COLUMNS
    assert all(len(r) == len(tables.CSV_COLUMNS) for r in reader)
    frame = pd.read_csv(io.StringIO(text))
    assert len(frame) == len(table.rows)
    sweep = results["sweep"]
    row = frame[frame["analysis"] == "direct-effect sweep: hours_%"].iloc[0]
    assert row["interval_lower"] == sweep.union_ci.low            # full precision
    assert row["bounds_upper"] == sweep.identified_set.high
    assert row["breakdown"] == sweep.breakdown.scale
    assert row["n"] == sweep.n and "prove" in row["caution"]


def test_json_round_trip(results):
    doc = json.loads(tables.table_json(outputs.results_table(all_results(results))))
    assert {"title", "rows", "assumptions", "caution"} <= set(doc)
    fit = results["fit"]
    first = doc["rows"][0]
    assert first["estimate"] == fit.tsls.value("hours_%")
    assert first["interval"] == [fit.conf_int("hours_%").to_list()]
    assert first["bounds"] is None and first["breakdown"] is None
    assert all(r["caution"] for r in doc["rows"])


# ----------------------------------------------------------------------------- file dicts
def test_table_files_names_and_determinism(results):
    files = outputs.table_files(results["sweep"])
    assert set(files) == {f"sweep-table.{ext}" for ext in ("md", "tex", "csv", "json")}
    assert outputs.table_files(results["sweep"]) == files
    several = outputs.table_files(all_results(results))
    assert set(several) == {f"summary-table.{ext}" for ext in ("md", "tex", "csv", "json")}


def test_figure_files_for_one_and_several_results(results):
    files = outputs.figure_files(results["sweep"], ("png", "svg"))
    assert set(files) == {"sweep-curve.png", "sweep-curve.svg", "sweep-frontier.png",
                          "sweep-frontier.svg"}
    assert all(isinstance(v, bytes) for v in files.values())
    several = outputs.figure_files([results["fit"], results["sweep"], results["weak"],
                                   results["prior"], results["corrbound"],
                                   results["discrete"]], ("png",),
                                  note="Invented test data.")
    assert {"fit-summary.png", "sweep-curve.png", "sweep2-curve.png", "prior-map.png",
            "corrbound-curve.png", "discrete-curve.png", "summary-intervals.png"} <= set(several)
    assert several["sweep-curve.png"] != files["sweep-curve.png"]   # the note is drawn


def test_write_bundle_takes_figures_and_tables(results, tmp_path):
    files = {**outputs.table_files(results["prior"]),
             **outputs.figure_files(results["prior"], ("pdf",))}
    written = writer.write_bundle(tmp_path / "out", files)
    assert sorted(p.name for p in written) == sorted(files)
    assert (tmp_path / "out" / "prior-map.pdf").read_bytes().startswith(b"%PDF")


def test_existing_bundles_are_unchanged(results):
    assert set(markdown.sweep_files(results["sweep"])) == {"sweep.json", "sweep.md", "curve.csv"}
    assert set(markdown.prior_files(results["prior"])) == {"prior.json", "prior.md"}
    doc = json.loads(markdown.sweep_files(results["sweep"])["sweep.json"])
    assert {"curve", "breakdown", "frontier", "curve_extended"} <= set(doc)


# ============================================================================ published, calibrate
# Built with the library: an invented published table (not from any paper) and the invented
# irrigation example data.
EXAMPLE = Path(__file__).resolve().parents[2] / "examples" / "irrigation.csv"


def irrigation_spec():
    return Spec("maize_yield", ["irrigation_hours"], ["height_m"],
                controls=["plot_ha", "soil"], cluster="village")


@pytest.fixture(scope="module")
def extra():
    from sensiv.sensitivity.calibrate import calibrate
    from sensiv.sensitivity.published import published_analysis

    clay = pd.read_csv(EXAMPLE).assign(clay=lambda f: (f["soil"] == "clay").astype(int))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return {
            "published": published_analysis(estimate=0.75, se=0.25, first_stage=4.2,
                                            first_stage_se=0.6, reduced_form=3.15,
                                            reduced_form_se=0.95, n=212,
                                            direct=["-0.25:0.25rf"], prior=["normal:0:0.5"]),
            # worst case, no n, no prior
            "published_bare": published_analysis(estimate=0.75, se=0.25, first_stage=4.2,
                                                 first_stage_se=0.6, direct=["-1:0.5"]),
            "calibrate": calibrate(EXAMPLE, irrigation_spec()),
            "calibrate_zfs": calibrate(clay, irrigation_spec(), no_first_stage_group="clay"),
        }


def everything(results, extra):
    return [*all_results(results), extra["published"], extra["published_bare"],
            extra["calibrate_zfs"]]


def test_kind_names_new_results(extra):
    assert registry.entry_for(extra["published"]).name == "published"
    assert registry.entry_for(extra["calibrate"]).name == "calibrate"


def test_published_rows_read_the_result(extra):
    res = extra["published"]
    est, stress, bias, ar, pri = table_rows.published_rows(res)
    assert (est.estimate, est.se) == (res.estimate, res.se)
    assert est.interval == (Interval(res.curve.lower[0], res.curve.upper[0]),)
    # common practice, no source: at zero direct effect the interval is the printed one,
    # estimate ± z·se (z = 1.959964 for 95%)
    assert est.interval[0].low == pytest.approx(0.75 - 1.959964 * 0.25, rel=1e-6)
    assert stress.bounds == (res.identified_set,) and stress.interval == (res.union_ci,)
    assert stress.breakdown == res.breakdown.scale
    assert "-0.25:0.25rf" in stress.assumption
    # the approximation is stated once, among the assumptions below the table, not in every row
    assert not any(res.approximation in r.assumption for r in (est, stress, bias, ar, pri))
    assert sum(res.approximation in a for a in res.assumptions()) == 1
    assert ar.interval == res.ar_set and ar.bounds is None
    assert pri.interval == (res.prior.interval,) and pri.estimate == res.prior.center
    assert bias.interval == (res.bias_aware.ci,) and bias.estimate == res.bias_aware.estimate
    assert bias.breakdown == res.breakdown.bias_aware_scale and bias.bounds is None
    assert {r.n for r in (est, stress, bias, ar, pri)} == {212}
    assert all(r.covariance.startswith("from reported numbers")
               for r in (est, stress, bias, ar, pri))
    assert "prove" in stress.caution
    bare = table_rows.published_rows(extra["published_bare"])
    assert len(bare) == 4 and all(r.n is None for r in bare)
    assert "worst-case" in bare[0].covariance


def test_calibration_rows_read_the_result(extra):
    cal = extra["calibrate_zfs"]
    rows = table_rows.calibrate_rows(cal)
    assert len(rows) == 1 + len(cal.yardsticks) + 1
    scale = rows[0]
    assert scale.estimate == float(cal.scale.reduced_form[0]) and scale.interval is None
    for row, b in zip(rows[1:], cal.yardsticks):
        assert b.name in row.analysis
        assert (row.estimate, row.share_rf, row.sd_units) == (
            b.implied_direct, b.implied_direct_rf, b.implied_direct_sd)
        assert row.suggestion == b.sweep_option and row.se is None
    z = cal.zero_first_stage
    zrow = rows[-1]
    assert (zrow.estimate, zrow.se) == (float(z.direct[0]), float(z.se[0]))
    assert zrow.interval == (z.interval[0],) and zrow.n == z.n
    assert zrow.share_rf == z.direct_rf[0] and z.prior_options[0] in zrow.suggestion
    assert "premise doubtful" in zrow.assumption
    assert all("reference magnitudes" in r.caution for r in rows)
    assert len(table_rows.calibrate_rows(extra["calibrate"])) == 1 + 2   # scale, two yardsticks


def test_tables_with_new_results_are_structurally_sound(results, extra):
    items = everything(results, extra)
    table = outputs.results_table(items)
    n_rows = len(table.rows)
    tex = tables.table_latex(table)
    assert tex.count(r"\begin{tabular}") == tex.count(r"\end{tabular}") == 1
    spec = re.search(r"\\begin\{tabular\}\{(.*)\}\n", tex).group(1)
    ncol = latex_columns(spec)
    body = tex[tex.index(r"\toprule"):tex.index(r"\bottomrule")]
    lines = [line for line in body.splitlines() if line.endswith(r"\\")]
    assert len(lines) == 1 + n_rows
    for line in lines:
        assert len(re.findall(r"(?<!\\)&", line)) == ncol - 1, line
        assert line.count("$") % 2 == 0, line
        assert line.count("{") == line.count("}"), line
    assert "--direct" not in tex and "-{}-direct" in tex       # not an en dash
    md = tables.table_markdown(table)
    assert {markdown_row_cells(line) for line in md.splitlines()
            if line.startswith("|")} == {len(tables.COLUMNS)}
    assert "**Assumptions — direct-effect stress test from printed numbers:**" in md
    assert "**Assumptions — calibration of direct effects:**" in md
    assert "reference magnitudes" in md and "do not prove" in md
    reader = list(csv.reader(io.StringIO(tables.table_csv(table))))
    assert tuple(reader[0]) == tables.CSV_COLUMNS
    assert len(reader) == 1 + n_rows and all(len(r) == len(tables.CSV_COLUMNS) for r in reader)


def test_new_rows_round_trip_through_csv_and_json(extra):
    cal, bare = extra["calibrate_zfs"], extra["published_bare"]
    table = outputs.results_table([bare, cal])
    frame = pd.read_csv(io.StringIO(tables.table_csv(table)), keep_default_na=False)
    b = cal.yardsticks[1]
    row = frame[frame["analysis"] == f"yardstick: direct effect of height_m without {b.name}"]
    row = row.iloc[0]
    assert float(row["estimate"]) == b.implied_direct                 # full precision
    assert float(row["share_of_reduced_form"]) == b.implied_direct_rf
    assert float(row["sd_units"]) == b.implied_direct_sd and row["suggestion"] == b.sweep_option
    assert frame.iloc[0]["n"] == ""                                  # n not printed
    doc = json.loads(tables.table_json(table))
    assert doc["rows"][0]["n"] is None and doc["rows"][0]["share_of_reduced_form"] is None
    zrow = doc["rows"][-1]
    z = cal.zero_first_stage
    assert zrow["interval"] == [z.interval[0].to_list()] and zrow["se"] == float(z.se[0])
    assert zrow["sd_units"] == z.direct_sd[0]
    assert set(doc["assumptions"]) == {"direct-effect stress test from printed numbers",
                                       "calibration of direct effects"}
    md = tables.table_markdown(outputs.results_table(bare))
    assert "| — |" in md.splitlines()[4]                               # n shown as a dash


def test_table_files_for_new_results(results, extra):
    for kind in ("published", "calibrate"):
        files = outputs.table_files(extra[kind])
        assert set(files) == {f"{kind}-table.{ext}" for ext in ("md", "tex", "csv", "json")}
        assert outputs.table_files(extra[kind]) == files
    mixed = outputs.table_files([results["sweep"], extra["published"], extra["calibrate"]])
    assert set(mixed) == {f"summary-table.{ext}" for ext in ("md", "tex", "csv", "json")}
    assert outputs.results_table(extra["published"]).title.endswith("from printed numbers")


def test_figure_files_for_new_results(results, extra):
    pub = outputs.figure_files(extra["published"], ("png",))
    assert set(pub) == {"published-curve.png", "published-frontier.png"}
    cal = outputs.figure_files(extra["calibrate"], ("png", "svg"))
    assert set(cal) == {"calibrate-yardsticks.png", "calibrate-yardsticks.svg"}
    assert outputs.figure_files(extra["calibrate"], ("png", "svg")) == cal   # same bytes
    mixed = outputs.figure_files([results["sweep"], extra["published"], extra["calibrate"],
                                 extra["calibrate_zfs"]], ("png",), note="Invented data.")
    assert set(mixed) == {"sweep-curve.png", "sweep-frontier.png", "published-curve.png",
                          "published-frontier.png", "calibrate-yardsticks.png",
                          "calibrate2-yardsticks.png", "summary-intervals.png"}
    # calibrations alone bound no effect: no summary figure
    two = outputs.figure_files([extra["calibrate"], extra["calibrate_zfs"]], ("png",))
    assert set(two) == {"calibrate-yardsticks.png", "calibrate2-yardsticks.png"}
