"""Recipe keys of absorbed fixed effects: ``absorb_tolerance`` gives what the library call with
the same tolerance gives (one path, two spellings: common practice, no source), a tolerance
outside (0, 1) and a ``discrete`` analysis on data with ``absorb`` are refused with the key and
line."""

from __future__ import annotations

import shutil
import warnings
from pathlib import Path

import pytest

from sensiv.core.errors import InputError
from sensiv.data import Spec, from_file
from sensiv.estimation import iv
from sensiv.recipes.parse import parse_recipe
from sensiv.recipes.run import run_recipe

ROOT = Path(__file__).resolve().parents[2]

RECIPE = """\
title = "Irrigation (INVENTED data)"

[data]
path = "irrigation.csv"
outcome = "maize_yield"
treatments = ["irrigation_hours"]
instruments = ["height_m"]
controls = ["plot_ha"]
absorb = ["village", "soil"]
absorb_tolerance = TOL

[[analysis]]
kind = "fit"
"""


@pytest.fixture()
def folder(tmp_path) -> Path:
    shutil.copy(ROOT / "examples" / "irrigation.csv", tmp_path / "irrigation.csv")
    return tmp_path


def write(folder: Path, text: str) -> Path:
    path = folder / "recipe.toml"
    path.write_text(text)
    return path


def test_absorb_tolerance_key_equals_the_library_call(folder):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run = run_recipe(parse_recipe(write(folder, RECIPE.replace("TOL", "1e-3"))))
        spec = Spec("maize_yield", ("irrigation_hours",), ("height_m",), controls=("plot_ha",),
                    absorb=("village", "soil"))
        direct = iv.fit(from_file(folder / "irrigation.csv", spec), absorb_tolerance=1e-3)
        default = iv.fit(from_file(folder / "irrigation.csv", spec))
    got = run.runs[0].result.to_dict()
    assert got == direct.to_dict()
    assert got["absorb_tolerance"] <= 1e-3
    assert got["absorb_iterations"] <= default.to_dict()["absorb_iterations"]


@pytest.mark.parametrize("value", ["0.0", "1.5", "-1e-9"])
def test_absorb_tolerance_outside_0_1_names_key_and_line(folder, value):
    with pytest.raises(InputError, match=r"recipe.toml line 10: absorb_tolerance .* \(0, 1\)"):
        parse_recipe(write(folder, RECIPE.replace("TOL", value)))


def test_discrete_with_absorb_is_refused_naming_the_key(folder):
    text = RECIPE.replace("absorb_tolerance = TOL\n", "").replace(
        'kind = "fit"', 'kind = "discrete"')
    with pytest.raises(InputError, match=r"line 9: analysis 'discrete' .* cannot absorb"):
        parse_recipe(write(folder, text))
