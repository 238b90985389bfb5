"""``sensiv run`` writes the figure formats a recipe names (``formats = [...]``) unless
``--format`` is given on the command line (common practice for tools with a config file and
flags, no source: the flag wins)."""

from __future__ import annotations

from pathlib import Path

from typer.testing import CliRunner

from sensiv.cli import app

ROOT = Path(__file__).resolve().parents[2]


def _recipe(tmp_path: Path, formats: str) -> Path:
    path = tmp_path / "r.toml"
    path.write_text(
        f"{formats}\n[data]\npath = \"{(ROOT / 'examples' / 'nudge.csv').as_posix()}\"\n"
        'outcome = "bp_controlled"\ntreatments = ["screened"]\ninstruments = ["sms"]\n'
        '[[analysis]]\nkind = "fit"\n', encoding="utf-8")
    return path


def _figures(out: Path) -> set[str]:
    return {p.suffix for p in (out / "figures").iterdir()}


def test_recipe_formats_are_written(tmp_path):
    out = tmp_path / "out"
    res = CliRunner().invoke(app, ["run", str(_recipe(tmp_path, 'formats = ["png", "pdf"]')),
                                   "--out", str(out)])
    assert res.exit_code == 0, res.output
    assert _figures(out) == {".png", ".pdf"}


def test_format_option_wins_over_the_recipe(tmp_path):
    out = tmp_path / "out"
    res = CliRunner().invoke(app, ["run", str(_recipe(tmp_path, 'formats = ["pdf"]')),
                                   "--out", str(out), "--format", "svg"])
    assert res.exit_code == 0, res.output
    assert _figures(out) == {".png", ".svg"}      # PNG always: the HTML report embeds it


def test_no_formats_anywhere_gives_png(tmp_path):
    out = tmp_path / "out"
    res = CliRunner().invoke(app, ["run", str(_recipe(tmp_path, "")), "--out", str(out)])
    assert res.exit_code == 0, res.output
    assert _figures(out) == {".png"}


def test_run_prints_each_study_summary_table(tmp_path):
    res = CliRunner().invoke(app, ["run", str(_recipe(tmp_path, "")), "--out",
                                   str(tmp_path / "out")])
    assert res.exit_code == 0, res.output
    lines = res.stdout.splitlines()
    at = lines.index("== study1 ==")
    assert lines[at + 1].startswith("Analysis") and "2SLS: screened" in lines[at + 3]
