"""`sensiv sweep` and `sensiv prior` on the command line: contracts and bad input.

Common practice, no source: these check the interface, the numbers are checked in
tests/sensitivity/test_bounds.py against the reference library.
"""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pytest
from typer.testing import CliRunner

from sensiv.cli.app import app

ROOT = Path(__file__).resolve().parents[2]
EXAMPLE = ROOT / "examples" / "irrigation.csv"
ROLES = ("--outcome", "maize_yield", "--treatment", "irrigation_hours", "--instrument",
         "height_m", "--control", "plot_ha", "--control", "soil", "--cluster", "village")
runner = CliRunner()


def invoke(*args):
    return runner.invoke(app, [str(a) for a in args])


def bad(result, *fragments):
    assert result.exit_code == 2, (result.exit_code, result.stdout, result.stderr)
    assert "Traceback" not in result.stderr + result.stdout
    assert result.stdout == ""
    for fragment in fragments:
        assert fragment.lower() in result.stderr.lower(), result.stderr


def test_readme_sweep_example(tmp_path):
    out = tmp_path / "sweep"
    result = invoke("sweep", EXAMPLE, *ROLES, "--direct=-0.005:0.005", "--out", out)
    assert result.exit_code == 0, result.stderr
    assert "Union of 95% intervals" in result.stdout
    assert "Caution" in result.stdout
    assert {p.name for p in out.iterdir()} == {
        "sweep.json", "sweep.md", "curve.csv", "sweep-table.md", "sweep-table.tex",
        "sweep-table.csv", "sweep-table.json", "sweep-curve.png", "sweep-frontier.png",
        ".sensiv-bundle"}  # the marker of a bundle sensiv wrote whole
    assert (out / "sweep-curve.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    curve = pd.read_csv(out / "curve.csv")
    assert len(curve) == 101 and list(curve.columns) == [
        "scale", "direct", "direct_rf", "direct_sd", "lower", "upper", "id_lower", "id_upper",
        "ba_lower", "ba_upper"]
    doc = json.loads((out / "sweep.json").read_text())
    assert curve["ba_lower"].tolist() == [row["ba_lower"] for row in doc["curve"]]
    assert "Bias-aware 95% interval" in result.stdout
    # the direct effect beside the scale: scale × half-width, / reduced form, × SD(z)/SD(y)
    # (common practice, no source)
    rf, sd_y = doc["scale"]["reduced_form"]["height_m"], doc["scale"]["outcome_sd"]
    sd_z = doc["scale"]["instrument_sd"]["height_m"]
    assert curve["direct"].tolist() == pytest.approx((curve["scale"] * 0.005).tolist())
    assert curve["direct_rf"].tolist() == pytest.approx((curve["direct"] / abs(rf)).tolist())
    assert curve["direct_sd"].tolist() == pytest.approx((curve["direct"] * sd_z / sd_y).tolist())


def test_readme_sweep_json_contract():
    result = invoke("sweep", EXAMPLE, *ROLES, "--direct=-0.2:0.2rf", "--points", "11", "--json")
    assert result.exit_code == 0, result.stderr
    doc = json.loads(result.stdout)
    for key in ("estimate", "se", "direct_set", "identified_set", "union_ci", "breakdown",
                "curve", "ar_set"):
        assert key in doc
    assert set(doc["breakdown"]) >= {"threshold", "scale", "direct_lower", "direct_upper"}
    assert set(doc["curve"][0]) == {"scale", "lower", "upper", "id_lower", "id_upper", "ba_lower",
                                  "ba_upper"}
    assert len(doc["curve"]) == 11
    assert doc["direct_set_rf"][0] == pytest.approx([-0.2, 0.2])
    assert doc["caution"]


def test_readme_prior_examples(tmp_path):
    result = invoke("prior", EXAMPLE, *ROLES, "--prior", "normal:0:0.003", "--json")
    assert result.exit_code == 0, result.stderr
    doc = json.loads(result.stdout)
    assert set(doc) >= {"interval", "center", "method", "mc_error"}
    assert doc["method"] == "closed-form" and doc["mc_error"] is None
    result = invoke("prior", EXAMPLE, *ROLES, "--prior", "uniform:-0.006:0", "--out",
                    tmp_path / "p")
    assert result.exit_code == 0, result.stderr
    assert "quadrature" in result.stdout
    assert (tmp_path / "p" / "prior.json").exists()


@pytest.mark.parametrize("args,fragments", [
    (("--direct=0.1:-0.1",), ("exceeds",)),
    (("--direct=-0.1:0.1", "--direct=0:1"), ("2 --direct", "1 instrument")),
    (("--direct=-0.1:0.1pp",), ("unit suffix",)),
    ((), ("--direct",)),
    (("--direct=-0.1:0.1", "--focus", "plot_ha"), ("--focus 'plot_ha'",)),
    (("--direct=-0.1:0.1", "--points", "1"), ("--points",)),
])
def test_sweep_bad_input(args, fragments):
    bad(invoke("sweep", EXAMPLE, *ROLES, *args), *fragments)


def test_sweep_bad_polytope(tmp_path):
    path = tmp_path / "poly.csv"
    pd.DataFrame({"height_m": [1.0], "bound": [0.01]}).to_csv(path, index=False)
    bad(invoke("sweep", EXAMPLE, *ROLES, "--direct-polytope", path), "unbounded")
    empty = tmp_path / "empty.csv"
    empty.write_text("height_m,bound\n")
    bad(invoke("sweep", EXAMPLE, *ROLES, "--direct-polytope", empty), "no rows")
    infeasible = tmp_path / "inf.csv"
    pd.DataFrame({"height_m": [1.0, -1.0], "bound": [-0.01, -0.01]}).to_csv(infeasible,
                                                                           index=False)
    bad(invoke("sweep", EXAMPLE, *ROLES, "--direct-polytope", infeasible), "empty")


@pytest.mark.parametrize("args,fragments", [
    (("--prior", "normal:0:-1"), ("SD must be positive",)),
    (("--prior", "normal:0:0.1", "--prior", "normal:0:0.1"), ("2 --prior",)),
    (("--prior", "beta:1:1"), ("unknown law",)),
    (("--prior", "uniform:1:0"), ("LOW must be below HIGH",)),
])
def test_prior_bad_input(args, fragments):
    bad(invoke("prior", EXAMPLE, *ROLES, *args), *fragments)


def test_prior_file_not_psd(tmp_path):
    path = tmp_path / "p.json"
    path.write_text('{"mean": [0.0], "cov": [[-1.0]]}')
    bad(invoke("prior", EXAMPLE, *ROLES, "--prior-file", path), "positive semidefinite")


def test_sweep_adaptive_keys(tmp_path):
    # Masten & Poirier (2021) adaptive set: with one instrument it is the 2SLS point
    result = invoke("sweep", EXAMPLE, *ROLES, "--direct=-0.005:0.005", "--adaptive", "--json")
    assert result.exit_code == 0, result.stderr
    doc = json.loads(result.stdout)
    assert doc["min_relaxation"] == 0
    assert doc["adaptive_set"][0] == pytest.approx(doc["estimate"], rel=1e-9)
    assert doc["adaptive_set"][1] == pytest.approx(doc["estimate"], rel=1e-9)
    text = invoke("sweep", EXAMPLE, *ROLES, "--direct=-0.005:0.005", "--adaptive")
    assert "adaptive" in text.stdout.lower()


def test_sweep_adaptive_needs_one_treatment(tmp_path):
    import numpy as np

    rng = np.random.default_rng(0)
    frame = pd.DataFrame(rng.normal(size=(200, 5)), columns=["y", "x1", "x2", "z1", "z2"])
    path = tmp_path / "two.csv"
    frame.to_csv(path, index=False)
    bad(invoke("sweep", path, "--outcome", "y", "--treatment", "x1", "--treatment", "x2",
               "--instrument", "z1", "--instrument", "z2", "--direct=0:0", "--direct=0:0",
               "--adaptive"), "--adaptive needs one treatment")


@pytest.mark.parametrize("command,args,figure", [
    ("prior", ("--prior", "normal:0:0.003", "--threshold", "0.01"), "prior-map"),
    ("corrbound", ("--max-ratio", "0.1", "--reps", "20", "--seed", "1"), "corrbound-curve"),
    ("calibrate", (), "calibrate-yardsticks"),
])
def test_out_writes_tables_and_figures_in_each_format(tmp_path, command, args, figure):
    out = tmp_path / "o"
    result = invoke(command, EXAMPLE, *ROLES, *args, "--out", out, "--format", "svg",
                    "--format", "pdf")
    assert result.exit_code == 0, result.stderr
    names = {p.name for p in out.iterdir()}
    assert {f"{figure}.svg", f"{figure}.pdf", f"{command}-table.tex"} <= names
    assert (out / f"{figure}.pdf").read_bytes().startswith(b"%PDF")
    import xml.etree.ElementTree as ET

    ET.parse(out / f"{figure}.svg")


def test_bad_format_on_an_analysis_command(tmp_path):
    bad(invoke("sweep", EXAMPLE, *ROLES, "--direct=0:0", "--out", tmp_path / "o", "--format",
               "jpeg"), "--format 'jpeg'")
    assert not (tmp_path / "o").exists()


def test_breakdown_in_the_trades_units_everywhere(tmp_path):
    # common practice, no source: the same direct effect in text, JSON, Markdown and CSV tables
    out = tmp_path / "units"
    result = invoke("sweep", EXAMPLE, *ROLES, "--direct=-0.005:0.005", "--out", out)
    assert result.exit_code == 0, result.stderr
    doc = json.loads((out / "sweep.json").read_text())
    b = doc["breakdown"]
    units = b["direct_units"]
    assert units["outcome"][0] == pytest.approx(b["scale"] * 0.005, rel=1e-12)
    value = units["outcome"][0]
    assert units["rf"][0] == pytest.approx(value / abs(doc["scale"]["reduced_form"]["height_m"]))
    assert (f"the conclusion holds up to a direct effect of {value:.4g} in outcome units "
            f"({100 * units['rf'][0]:.4g}% of the reduced form; {units['sd'][0]:.4g} outcome SD "
            "per instrument SD); that is") in result.stdout
    assert f"{b['scale']:.4g} × the stated set" in result.stdout
    table = pd.read_csv(out / "sweep-table.csv")
    row = table.iloc[0]
    assert float(row["breakdown_direct"]) == pytest.approx(value)
    assert float(row["breakdown_direct_rf"]) == pytest.approx(units["rf"][0])
    assert float(row["breakdown_direct_sd"]) == pytest.approx(units["sd"][0])
    assert f"direct effect up to {value:.4g}" in (out / "sweep-table.md").read_text()
    assert "breakdown direct effect" in (out / "sweep.md").read_text()
    tex = (out / "sweep-table.tex").read_text()
    assert f"direct effect up to {value:.4g}" in tex
    tj = json.loads((out / "sweep-table.json").read_text())
    assert tj["rows"][0]["breakdown_direct_units"]["outcome"] == pytest.approx([value])


def test_no_conclusion_says_where_one_would_first_appear():
    # the threshold lies inside the interval at zero direct effect
    result = invoke("sweep", EXAMPLE, *ROLES, "--direct=-0.005:0.005", "--threshold", "0.012")
    assert result.exit_code == 0, result.stderr
    assert "no conclusion to break" in result.stdout
    assert "a conclusion about 0.012 would first appear at a direct effect of" in result.stdout
    assert "an end of the interval crosses" not in result.stdout


def test_at_grid_on_the_command_line_and_in_a_recipe(tmp_path):
    # common practice, no source: the value of the stated half-width gives the stated union
    result = invoke("sweep", EXAMPLE, *ROLES, "--direct=-0.005:0.005", "--at", "0.005,0.01",
                    "--json")
    assert result.exit_code == 0, result.stderr
    doc = json.loads(result.stdout)
    assert [p["value"] for p in doc["at"]] == [0.005, 0.01]
    assert doc["at"][0]["union_ci"] == pytest.approx(doc["union_ci"])
    text = invoke("sweep", EXAMPLE, *ROLES, "--direct=-0.005:0.005", "--at", "0.005,0.01")
    assert "Intervals at given direct effects" in text.stdout
    bad(invoke("sweep", EXAMPLE, *ROLES, "--direct=-0.005:0.005", "--at", "big"),
        "--at value 'big' is not a number")
    recipe = tmp_path / "r.toml"
    recipe.write_text(f'''[[study]]
name = "s"
[study.data]
path = "{EXAMPLE.as_posix()}"
outcome = "maize_yield"
treatments = ["irrigation_hours"]
instruments = ["height_m"]
controls = ["plot_ha", "soil"]
[[study.analysis]]
kind = "sweep"
direct = ["-0.005:0.005"]
at = [0.005, "0.1rf"]
''')
    from sensiv.recipes.run import run_recipe

    run = run_recipe(recipe)
    points = run.runs[0].result.at
    assert [p.given.text() for p in points] == ["0.005", "0.1rf"]


def test_sweep_reports_the_optimally_weighted_interval(tmp_path):
    # common practice, no source: the contract of the keys (numbers checked in
    # tests/sensitivity/test_optimal_weights.py)
    import numpy as np

    rng = np.random.default_rng(7)
    z = rng.normal(size=(300, 2))
    x = z @ [0.8, 0.4] + rng.normal(size=300)
    y = 0.5 * x + rng.normal(size=300)
    path = tmp_path / "two.csv"
    pd.DataFrame({"y": y, "x": x, "z1": z[:, 0], "z2": z[:, 1]}).to_csv(path, index=False)
    args = ("sweep", path, "--outcome", "y", "--treatment", "x", "--instrument", "z1",
            "--instrument", "z2", "--direct=-0.05:0.05", "--direct=0:0.02")
    result = invoke(*args, "--json")
    assert result.exit_code == 0, result.stderr
    doc = json.loads(result.stdout)
    assert doc["bias_aware"]["weighting"] == "2sls"
    opt = doc["bias_aware_optimal"]
    assert opt["weighting"] == "optimal" and set(opt["weights"]) == {"z1", "z2"}
    assert opt["ci"][1] - opt["ci"][0] <= doc["bias_aware"]["ci"][1] - doc["bias_aware"]["ci"][0]
    assert 0.0 < opt["length_ratio"] <= 1.0
    text = invoke(*args)
    assert text.exit_code == 0 and "optimal weights" in text.stdout
