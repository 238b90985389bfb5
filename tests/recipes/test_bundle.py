"""`sensiv run` and the report bundle: contents, reproducibility, atomic output, bad recipes.

Common practice, no source: these check the interface; the numbers are checked elsewhere.
"""

from __future__ import annotations

import json
import shutil
from html.parser import HTMLParser
from pathlib import Path

import pytest
from typer.testing import CliRunner

from sensiv.cli.app import app

ROOT = Path(__file__).resolve().parents[2]
runner = CliRunner()

RECIPE = """\
title = "Irrigation (INVENTED data)"
seed = 3

[data]
path = "irrigation.csv"
outcome = "maize_yield"
treatments = ["irrigation_hours"]
instruments = ["height_m"]
controls = ["plot_ha", "soil"]
cluster = "village"

[[analysis]]
kind = "fit"

[[analysis]]
kind = "sweep"
direct = ["-0.005:0.005"]
points = 21

[[analysis]]
kind = "prior"
prior = ["normal:0:0.003"]
"""


@pytest.fixture()
def recipe(tmp_path) -> Path:
    shutil.copy(ROOT / "examples" / "irrigation.csv", tmp_path / "irrigation.csv")
    path = tmp_path / "recipe.toml"
    path.write_text(RECIPE)
    return path


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


class _Collector(HTMLParser):
    def __init__(self):
        super().__init__()
        self.images, self.headings, self.tables = [], [], 0
        self._in_heading = False

    def handle_starttag(self, tag, attrs):
        if tag == "img":
            self.images.append(dict(attrs)["src"])
        if tag in ("h1", "h2", "h3"):
            self._in_heading = True
        if tag == "table":
            self.tables += 1

    def handle_endtag(self, tag):
        if tag in ("h1", "h2", "h3"):
            self._in_heading = False

    def handle_data(self, data):
        if self._in_heading:
            self.headings.append(data)


def test_run_writes_the_bundle(recipe, tmp_path):
    out = tmp_path / "out"
    result = run("run", recipe, "--out", out, "--format", "png", "--format", "pdf")
    assert result.exit_code == 0, result.stderr
    names = {str(p.relative_to(out)) for p in out.rglob("*") if p.is_file()}
    assert {"report.md", "report.html", "recipe.toml"} <= names
    assert {"results/study1-1-fit.json", "results/study1-2-sweep.json",
            "results/study1-3-prior.json"} <= names
    assert "tables/study1-2-sweep-table.tex" in names
    assert "figures/study1-2-sweep-curve.png" in names and "figures/study1-2-sweep-curve.pdf" in names
    assert "figures/study1-summary-intervals.png" in names
    report = (out / "report.md").read_text()
    for words in ("2SLS with diagnostics", "Direct-effect sweep", "Prior interval",
                  "Assumptions:", "Caution", "do not establish that an instrument is valid"):
        assert words in report
    parser = _Collector()
    parser.feed((out / "report.html").read_text())
    assert parser.images and all(src.startswith("data:image/png;base64,") for src in parser.images)
    # common practice, no source: the study's headline table holds every row once, and no
    # section repeats it
    assert parser.tables == 1
    rows = [line for line in report.splitlines() if line.startswith("| ") and "---" not in line]
    assert len(rows) == len(set(rows)) >= 4
    # figures are captioned by what they show, never by their file path
    assert "![figures/" not in report
    assert "Direct-effect sweep" in parser.headings
    sweep = json.loads((out / "results/study1-2-sweep.json").read_text())
    assert sweep["union_ci"][0] < sweep["identified_set"][0]


def test_same_recipe_gives_identical_bytes(recipe, tmp_path):
    a, b = tmp_path / "a", tmp_path / "b"
    assert run("run", recipe, "--out", a).exit_code == 0
    assert run("run", recipe, "--out", b).exit_code == 0
    files = sorted(p.relative_to(a) for p in a.rglob("*") if p.is_file())
    assert files == sorted(p.relative_to(b) for p in b.rglob("*") if p.is_file())
    for name in files:
        assert (a / name).read_bytes() == (b / name).read_bytes(), name


@pytest.mark.parametrize("change,fragments", [
    (("points = 21", "pointz = 21"), ("unknown key 'pointz'", "line 18")),
    (("points = 21", "points = 2.5"), ("'points'", "line 18")),
    (('path = "irrigation.csv"', 'path = "gone.csv"'), ("gone.csv", "line 5")),
])
def test_bad_recipe_exits_2_and_writes_nothing(recipe, tmp_path, change, fragments):
    recipe.write_text(RECIPE.replace(*change))
    out = tmp_path / "never"
    result = run("run", recipe, "--out", out)
    assert result.exit_code == 2
    assert "Traceback" not in result.stderr and result.stdout == ""
    for fragment in fragments:
        assert fragment in result.stderr
    assert not out.exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".never")]


def test_bad_format_exits_2(recipe, tmp_path):
    result = run("run", recipe, "--out", tmp_path / "o", "--format", "gif")
    assert result.exit_code == 2 and "--format 'gif'" in result.stderr


def test_demo_recipe_is_the_shipped_example():
    from sensiv.demo import demo_recipe

    assert (ROOT / "examples" / "demo.toml").read_text(encoding="utf-8") == demo_recipe()


def test_demo_runs_three_invented_studies(tmp_path):
    out = tmp_path / "demo"
    figures = tmp_path / "figs"
    result = run("demo", "--out", out, "--figures-dir", figures, "--json")
    assert result.exit_code == 0, result.stderr
    doc = json.loads(result.stdout)
    assert doc["invented"] is True
    assert set(doc["studies"]) == {"irrigation", "nudge", "published"}
    # the union interval over the assumed direct effects covers the invented truth
    assert doc["studies"]["irrigation"]["truth_covered"]["sweep"] is True
    assert (out / "report.html").exists() and (out / "data" / "irrigation.csv").exists()
    assert (out / "data" / "irrigation.csv").read_bytes() == (
        ROOT / "examples" / "irrigation.csv").read_bytes()
    assert sorted(p.name for p in figures.iterdir()) == sorted(
        [".sensiv-bundle", "README.md", *(p.name for p in (out / "figures").iterdir()
                                          if p.suffix == ".png")])
    # the bundle re-runs from its own recipe copy
    again = run("run", out / "recipe.toml", "--out", tmp_path / "again")
    assert again.exit_code == 0, again.stderr


def test_repository_figures_are_the_demo_figures():
    # figures/ holds the demo's PNG figures (regenerated by `sensiv demo --figures-dir figures`)
    shipped = sorted(p.name for p in (ROOT / "figures").glob("*.png"))
    assert shipped, "figures/ has the demo figures"
    for name in shipped:
        assert (ROOT / "figures" / name).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert "irrigation-summary-intervals.png" in shipped


def test_python_api_example_runs(tmp_path):
    # examples/analysis.py does the demo's irrigation analysis through the library API
    import subprocess
    import sys

    out = tmp_path / "api"
    done = subprocess.run([sys.executable, str(ROOT / "examples" / "analysis.py"), str(out)],
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    assert "Union interval over direct effects" in done.stdout
    assert {"summary-table.tex", "sweep-curve.png", "summary-intervals.png"} <= {
        p.name for p in out.iterdir()}


def test_calibration_rows_keep_their_own_table_and_caution(recipe, tmp_path):
    # common practice, no source: the headline table holds the analyses that bound the
    # effect; the calibration (reference magnitudes, not an effect) has its own table
    recipe.write_text(RECIPE + '\n[[analysis]]\nkind = "calibrate"\n')
    out = tmp_path / "out"
    result = run("run", recipe, "--out", out)
    assert result.exit_code == 0, result.stderr
    report = (out / "report.md").read_text()
    parser = _Collector()
    parser.feed((out / "report.html").read_text())
    assert parser.tables == 2
    head, calibration = report.split("### Calibrating a plausible violation")
    headline = [line for line in head.splitlines() if line.startswith("| ")]
    assert headline and not any("yardstick" in line or "calibration scale" in line
                                for line in headline)
    assert "| yardstick:" in calibration and "| — | — | — |" not in head
    summary_csv = (out / "tables" / "study1-summary-table.csv").read_text()
    assert "yardstick" not in summary_csv
    # each section ends with its own caution; none of them is the sweep's reused
    cautions = [line for line in report.splitlines() if line.startswith("> **Caution.**")]
    assert len(cautions) == len(set(cautions)) == 5  # report, fit, sweep, prior, calibrate
    assert "reference magnitudes" in calibration and "prior interval averages" in head
    # the sweep's breakdown set against the yardsticks, once, below the headline table
    assert head.count("Against the leave-one-out yardsticks") == 1
    assert "survives a direct effect of height_m up to" in head
    assert "Against the leave-one-out yardsticks" in result.stdout
