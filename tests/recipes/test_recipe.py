"""Recipes: schema validation with key and line, and runs that match the library calls.

Common practice, no source: the numbers themselves are checked elsewhere; here a recipe must
give exactly what the corresponding library call gives.
"""

from __future__ import annotations

import math

import re
import shutil
from pathlib import Path

import pytest

from sensiv.sensitivity import bounds
from sensiv.estimation import iv
from sensiv.data import Spec, from_file
from sensiv.core.errors import InputError
from sensiv.recipes.parse import parse_recipe
from sensiv.recipes.run import run_recipe

ROOT = Path(__file__).resolve().parents[2]

GOOD = """\
title = "Irrigation (INVENTED data)"
seed = 5

[data]
path = "irrigation.csv"
outcome = "maize_yield"
treatments = ["irrigation_hours"]
instruments = ["height_m"]
controls = ["plot_ha", "soil"]
cluster = "village"

[inference]
se = "cluster"

[[analysis]]
kind = "fit"

[[analysis]]
kind = "sweep"
direct = ["-0.005:0.005"]
points = 11
"""


@pytest.fixture()
def folder(tmp_path) -> Path:
    shutil.copy(ROOT / "examples" / "irrigation.csv", tmp_path / "irrigation.csv")
    return tmp_path


def write(folder: Path, text: str) -> Path:
    path = folder / "recipe.toml"
    path.write_text(text)
    return path


def test_single_study_recipe_runs_like_the_library(folder):
    recipe = parse_recipe(write(folder, GOOD))
    assert [s.name for s in recipe.studies] == ["study1"]
    run = run_recipe(recipe)
    assert [r.analysis.kind for r in run.runs] == ["fit", "sweep"]
    spec = Spec("maize_yield", ("irrigation_hours",), ("height_m",),
                controls=("plot_ha", "soil"), cluster="village")
    direct = bounds.sweep(from_file(folder / "irrigation.csv", spec), direct=["-0.005:0.005"],
                          points=11)
    assert run.runs[1].result.to_dict() == direct.to_dict()
    fit = iv.fit(from_file(folder / "irrigation.csv", spec))
    assert run.runs[0].result.to_dict() == fit.to_dict()


@pytest.mark.parametrize("change,fragments", [
    (("points = 11", "pointz = 11"), ("unknown key 'pointz'", "line 21")),
    (("points = 11", "points = \"many\""), ("'points'", "an integer", "line 21")),
    (('kind = "fit"', 'kind = "fitt"'), ("'fitt'", "line 16")),
    (('kind = "sweep"', 'kind = "sweeep"'), ("'sweeep'", "line 19")),
    (('direct = ["-0.005:0.005"]', 'direct = [1, 2]'), ("list of strings", "line 20")),
    (('path = "irrigation.csv"', 'path = "nowhere.csv"'), ("nowhere.csv", "does not exist",
                                                           "line 5")),
    (('se = "cluster"', 'se = "hc1"'), ("hc1", "line 13")),
    (("seed = 5", "seed = 5.5"), ("'seed'", "integer", "line 2")),
    (('title = "Irrigation (INVENTED data)"', "title = [1"), ("not valid TOML",)),
])
def test_bad_recipes_name_key_and_line(folder, change, fragments):
    text = GOOD.replace(*change)
    with pytest.raises(InputError) as err:
        parse_recipe(write(folder, text))
    for fragment in fragments:
        assert fragment in str(err.value)


def test_missing_recipe_file(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        parse_recipe(tmp_path / "none.toml")


def test_several_studies_and_data_free_kinds_need_no_data(folder):
    text = """\
[[study]]
name = "a"
[study.data]
path = "irrigation.csv"
outcome = "maize_yield"
treatments = ["irrigation_hours"]
instruments = ["height_m"]
[[study.analysis]]
kind = "fit"

[[study]]
name = "b"
[[study.analysis]]
kind = "sweep"
direct = ["0:0"]
"""
    with pytest.raises(InputError, match="needs a \\[data\\] table"):
        parse_recipe(write(folder, text))
    two = text.replace('name = "b"', 'name = "a"').replace('kind = "sweep"\ndirect = ["0:0"]',
                                                          'kind = "fit"')
    with pytest.raises(InputError, match="distinct"):
        parse_recipe(write(folder, two.replace("[[study]]\nname = \"a\"\n[[study.analysis]]",
                                               "[[study]]\nname = \"a\"\n[study.data]\n"
                                               "path = \"irrigation.csv\"\noutcome = \"y\"\n"
                                               "treatments = [\"x\"]\ninstruments = [\"z\"]\n"
                                               "[[study.analysis]]")))


def test_published_study_needs_no_data(folder):
    from sensiv.sensitivity.published import published_analysis

    text = """\
[[study]]
name = "table"
[[study.analysis]]
kind = "published"
estimate = 0.75
se = 0.25
first_stage = 4.2
first_stage_se = 0.6
reduced_form = 3.15
reduced_form_se = 0.95
direct = ["-0.25:0.25rf"]
"""
    run = run_recipe(parse_recipe(write(folder, text)))
    direct = published_analysis(estimate=0.75, se=0.25, first_stage=4.2, first_stage_se=0.6,
                                reduced_form=3.15, reduced_form_se=0.95,
                                direct=["-0.25:0.25rf"])
    assert run.runs[0].result.to_dict() == direct.to_dict()
    with pytest.raises(InputError, match="lacks first_stage"):
        run_recipe(parse_recipe(write(folder, text.replace("first_stage = 4.2\n", ""))))


def test_calibrate_in_a_recipe(folder):
    from sensiv.sensitivity.calibrate import calibrate

    text = GOOD + """
[[analysis]]
kind = "calibrate"
groups = { terrain = ["plot_ha", "soil"] }
"""
    run = run_recipe(parse_recipe(write(folder, text)))
    spec = Spec("maize_yield", ("irrigation_hours",), ("height_m",),
                controls=("plot_ha", "soil"), cluster="village")
    direct = calibrate(from_file(folder / "irrigation.csv", spec),
                       groups={"terrain": ["plot_ha", "soil"]})
    assert run.runs[2].result.to_dict() == direct.to_dict()


def test_where_and_categorical_keys(folder):
    # the recipe keys give the same fit as the Spec with the same filter (common practice,
    # no source: one path, two spellings)
    text = GOOD.replace('cluster = "village"', 'cluster = "village"\n'
                        'where = "plot_ha >= 0.5 and soil != \'clay\'"\n'
                        'categorical = ["soil"]')
    run = run_recipe(parse_recipe(write(folder, text)))
    fitted = run.runs[0].result
    spec = Spec("maize_yield", ("irrigation_hours",), ("height_m",),
                controls=("plot_ha", "soil"), cluster="village",
                where="plot_ha >= 0.5 and soil != 'clay'")
    direct = iv.fit(from_file(folder / "irrigation.csv", spec), se="cluster")
    assert fitted.to_dict() == direct.to_dict()
    assert fitted.n_filtered > 0 and fitted.where == spec.where


def test_bad_where_in_recipe_is_an_input_error(folder):
    text = GOOD.replace('cluster = "village"', 'cluster = "village"\nwhere = "plot_ha >"')
    with pytest.raises(InputError, match=r"line \d+: 'where' in .*syntax error at the end"):
        parse_recipe(write(folder, text))


# ------------------------------------------------------------------ errors in recipe terms
STUDY = """\
[[study]]
name = "main"
[study.data]
path = "irrigation.csv"
outcome = "maize_yield"
treatments = ["irrigation_hours"]
instruments = ["height_m"]
[[study.analysis]]
kind = "fit"
"""


@pytest.mark.parametrize("text, fragments", [
    (STUDY + '[[study.analysis]]\nkind = "sweep"\ndirect = ["-0.1:0.1"]\n'
             'points = 1000000000000\n',
     ["recipe.toml line 13: points = 1000000000000 in [[study.analysis]] 2 of study \"main\"",
      "10,001"]),
    ("seed = -5\n" + STUDY + '[[study.analysis]]\nkind = "prior"\nprior = ["normal:0:1"]\n',
     ["recipe.toml line 1: seed = -5", "[[study.analysis]] 2 of study \"main\""]),
    (STUDY.replace('[[study.analysis]]', '[study.inference]\nlevel = 1.5\n[[study.analysis]]'),
     ["recipe.toml line 9: level = 1.5 in [study.inference] of study \"main\""]),
])
def test_run_errors_name_file_line_study_analysis_and_key(folder, text, fragments):
    with pytest.raises(InputError) as info:
        run_recipe(write(folder, text))
    message = str(info.value)
    for fragment in fragments:
        assert fragment in message, message
    assert "--" not in message  # recipe keys, not command-line flags


def test_data_errors_in_a_run_name_the_data_file(folder):
    with pytest.raises(InputError) as info:
        run_recipe(write(folder, STUDY.replace('["height_m"]', '["heigth_m"]')))
    assert "'irrigation.csv'" in str(info.value) and "DataFrame" not in str(info.value)


@pytest.mark.parametrize("content, fragment", [
    (b"# r\xe9colte\n" + STUDY.encode(), "not UTF-8 text (byte 0xe9 at position 3, line 1)"),
    (STUDY.replace('kind = "fit"', 'kind = ["fit"]').encode(), "must be a string"),
    (b"study = [1, 2]\n", "study 1 is 1, not a table"),
    (b"study = []\n", "no analyses"),
])
def test_malformed_recipes_are_refused(folder, content, fragment):
    path = folder / "recipe.toml"
    path.write_bytes(content)
    with pytest.raises(InputError, match=re.escape(fragment)):
        parse_recipe(path)


def test_recipe_with_a_byte_order_mark_is_read(folder):
    path = folder / "recipe.toml"
    path.write_bytes(b"\xef\xbb\xbf" + STUDY.encode())
    assert parse_recipe(path).studies[0].name == "main"


def test_directory_is_reported_as_a_directory(folder):
    with pytest.raises(InputError, match="is a directory"):
        parse_recipe(folder)
    (folder / "data_dir").mkdir()
    with pytest.raises(InputError, match="is a directory"):
        parse_recipe(write(folder, STUDY.replace('"irrigation.csv"', '"data_dir"')))


def test_absorb_key(folder):
    # the recipe key gives the same fit as the Spec (common practice, no source: one path,
    # two spellings)
    text = GOOD.replace('cluster = "village"', 'cluster = "village"\nabsorb = ["village"]')
    run = run_recipe(parse_recipe(write(folder, text)))
    fitted = run.runs[0].result
    spec = Spec("maize_yield", ("irrigation_hours",), ("height_m",),
                controls=("plot_ha", "soil"), cluster="village", absorb=("village",))
    direct = iv.fit(from_file(folder / "irrigation.csv", spec), se="cluster")
    # equal to rounding: the recipe and the direct call may read the file in different chunks,
    # which changes only the order of the sums
    assert_close(fitted.to_dict(), direct.to_dict())
    assert "village" in fitted.to_dict()["absorbed"]


def assert_close(a, b, rel: float = 1e-12) -> None:
    if isinstance(a, dict):
        assert a.keys() == b.keys()
        for key in a:
            assert_close(a[key], b[key], rel)
    elif isinstance(a, (list, tuple)):
        assert len(a) == len(b)
        for x, y in zip(a, b):
            assert_close(x, y, rel)
    elif isinstance(a, float) and isinstance(b, float):
        assert math.isclose(a, b, rel_tol=rel, abs_tol=1e-14), (a, b)
    else:
        assert a == b
