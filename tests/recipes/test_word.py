"""`sensiv run` writes report.docx beside report.html: the same headings, tables and figures,
read back with python-docx; converted to PDF by LibreOffice where it is installed (common
practice for checking a generated Word file, no source)."""

from __future__ import annotations

import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import pytest
from typer.testing import CliRunner

from sensiv.cli.app import app
from sensiv.present.bundle import REPORT_CAUTION

docx = pytest.importorskip("docx")

ROOT = Path(__file__).resolve().parents[2]
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
runner = CliRunner()


@pytest.fixture(scope="module")
def bundle(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("word")
    shutil.copy(ROOT / "examples" / "irrigation.csv", folder / "irrigation.csv")
    (folder / "recipe.toml").write_text(RECIPE)
    result = runner.invoke(app, ["run", str(folder / "recipe.toml"), "--out",
                                 str(folder / "out")])
    assert result.exit_code == 0, result.stderr
    assert "report.docx" in result.stdout
    return folder / "out"


class Counter(HTMLParser):
    def __init__(self):
        super().__init__()
        self.counts = {"img": 0, "table": 0, "h2": 0, "h3": 0}

    def handle_starttag(self, tag, attrs):
        if tag in self.counts:
            self.counts[tag] += 1


def test_word_report_has_the_html_reports_tables_figures_and_headings(bundle):
    document = docx.Document(str(bundle / "report.docx"))
    counter = Counter()
    counter.feed((bundle / "report.html").read_text(encoding="utf-8"))
    assert len(document.tables) == counter.counts["table"] >= 1  # the headline table, once
    assert len(document.inline_shapes) == counter.counts["img"] >= 3
    headings = [p.text for p in document.paragraphs if p.style.name.startswith("Heading")]
    assert "Study: study1" in headings
    assert {"2SLS with diagnostics", "Prior interval"} <= set(headings)
    assert any(h.startswith("Direct-effect sweep") for h in headings)
    assert document.tables[0].rows[0].cells[0].text == "Analysis"


def test_word_report_states_assumptions_and_cautions(bundle):
    document = docx.Document(str(bundle / "report.docx"))
    text = "\n".join(p.text for p in document.paragraphs)
    assert REPORT_CAUTION in text
    assert text.count("Caution.") >= 4      # the report's and one per analysis
    bullets = [p.text for p in document.paragraphs if p.style.name == "List Bullet"]
    assert any("direct effect of each instrument" in b for b in bullets)


def test_without_python_docx_run_writes_the_rest_and_says_how(tmp_path, monkeypatch):
    from sensiv.recipes import bundle as recipe_bundle

    monkeypatch.setattr(recipe_bundle, "word_available", lambda: False)
    shutil.copy(ROOT / "examples" / "irrigation.csv", tmp_path / "irrigation.csv")
    (tmp_path / "recipe.toml").write_text(RECIPE.split("[[analysis]]\nkind = \"sweep\"")[0])
    result = runner.invoke(app, ["run", str(tmp_path / "recipe.toml"), "--out",
                                 str(tmp_path / "out")])
    assert result.exit_code == 0, result.stderr
    assert (tmp_path / "out" / "report.html").exists()
    assert not (tmp_path / "out" / "report.docx").exists()
    assert "pip install 'sensiv[word]'" in result.stdout


def test_libreoffice_converts_the_word_report_to_pdf(bundle, tmp_path):
    office = shutil.which("soffice") or shutil.which("libreoffice")
    if office is None:
        pytest.skip("LibreOffice is not installed (apt-get install libreoffice-writer)")
    profile = tmp_path / "profile"
    done = subprocess.run([office, f"-env:UserInstallation=file://{profile}", "--headless",
                           "--convert-to", "pdf", "--outdir", str(tmp_path),
                           str(bundle / "report.docx")], capture_output=True, timeout=300)
    assert done.returncode == 0, done.stderr
    pdf = (tmp_path / "report.pdf").read_bytes()
    assert pdf.startswith(b"%PDF-") and len(pdf) > 10_000
