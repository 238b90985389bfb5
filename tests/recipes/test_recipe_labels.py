"""Recipes: ``[study.labels]`` names columns for readers (report text, figures, results JSON)
and changes no number; a label of a column the study does not use is refused with its line.

Common practice, no source (invented demo data serve only to exercise the wording).
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest

from sensiv.core.errors import InputError
from sensiv.recipes.bundle import run_files
from sensiv.recipes.parse import parse_recipe
from sensiv.recipes.run import run_recipe

ROOT = Path(__file__).resolve().parents[2]

RECIPE = """\
title = "Irrigation (INVENTED data)"

[[study]]
name = "irrigation"

[study.data]
path = "irrigation.csv"
outcome = "maize_yield"
treatments = ["irrigation_hours"]
instruments = ["height_m"]
controls = ["plot_ha", "soil"]
cluster = "village"
{labels}
[[study.analysis]]
kind = "sweep"
direct = ["-0.005:0.005"]
points = 11

[[study.analysis]]
kind = "fit"
"""

LABELS = """
[study.labels]
maize_yield = "Maize yield (t/ha)"
irrigation_hours = "Irrigation (hours)"
height_m = "Height above the river (m)"
"""


@pytest.fixture()
def folder(tmp_path) -> Path:
    shutil.copy(ROOT / "examples" / "irrigation.csv", tmp_path / "irrigation.csv")
    return tmp_path


def run_of(folder: Path, labels: str):
    path = folder / "recipe.toml"
    path.write_text(RECIPE.format(labels=labels))
    return run_recipe(parse_recipe(path))


def test_labels_reach_report_figures_and_json_but_not_the_numbers(folder):
    plain, named = run_of(folder, ""), run_of(folder, LABELS)
    for a, b in zip(plain.runs, named.runs):
        assert a.result.to_dict() == b.result.to_dict()
    assert "effect of Irrigation (hours) on Maize yield (t/ha)" in str(named.runs[0].result)
    assert "effect of irrigation_hours on maize_yield" in str(plain.runs[0].result)
    ax = named.runs[0].result.plot("curve").axes[0]
    assert ax.get_ylabel() == "β, effect of Irrigation (t/ha per hour)"
    files = run_files(named, ("png",))
    report = files["report.md"]
    assert "Irrigation (hours)" in report
    document = json.loads(files["results/irrigation-1-sweep.json"])
    assert document["labels"]["height_m"] == "Height above the river (m)"
    assert document["focus"] == "irrigation_hours"          # JSON keeps the column names
    assert json.loads(run_files(plain, ("png",))["results/irrigation-1-sweep.json"])[
        "labels"] == {}


def test_a_label_of_an_unused_column_names_it_and_its_line(folder):
    bad = LABELS + 'rainfall = "Rainfall (mm)"\n'
    with pytest.raises(InputError) as caught:
        run_of(folder, bad)
    message = str(caught.value)
    assert "'rainfall'" in message and "line" in message


def test_a_label_must_be_text(folder):
    with pytest.raises(InputError, match="not a text"):
        run_of(folder, "\n[study.labels]\nmaize_yield = 3\n")


def test_a_study_of_printed_numbers_labels_its_roles(folder):
    text = """\
[[study]]
name = "table"
[study.labels]
treatment = "Schooling (years)"
outcome = "Log wage (log points)"
[[study.analysis]]
kind = "published"
estimate = 0.75
se = 0.25
first_stage = 4.2
first_stage_se = 0.6
direct = ["-0.1:0.1"]
"""
    path = folder / "recipe.toml"
    path.write_text(text)
    run = run_recipe(parse_recipe(path))
    ax = run.runs[0].result.plot("curve").axes[0]
    assert ax.get_ylabel() == "β, effect of Schooling (log points per year)"
    path.write_text(text.replace('treatment = "Schooling', 'educ = "Schooling'))
    with pytest.raises(InputError, match="'educ'"):
        parse_recipe(path)
