"""Recipes name the engine in ``[study.data]`` and may read a partitioned data set; the
results equal those of the default engine (the numpy engine is the reference; common practice,
no source; the irrigation data are invented demo data, used only for this consistency check)."""

from __future__ import annotations

import math
from pathlib import Path

import pandas as pd
import pytest

from sensiv.core.errors import InputError
from sensiv.recipes.run import run_recipe

ROOT = Path(__file__).resolve().parents[2]
pytest.importorskip("duckdb")

RECIPE = """\
[[study]]
name = "main"
[study.data]
path = "{path}"
outcome = "maize_yield"
treatments = ["irrigation_hours"]
instruments = ["height_m"]
controls = ["plot_ha", "soil"]
cluster = "village"
{engine}
[[study.analysis]]
kind = "sweep"
direct = ["-0.005:0.005"]
points = 11
"""


def written(folder: Path, path: str, engine: str = "") -> Path:
    recipe = folder / "recipe.toml"
    recipe.write_text(RECIPE.format(path=path, engine=engine))
    return recipe


def test_recipe_with_the_duckdb_engine_on_a_partitioned_folder(tmp_path):
    frame = pd.read_csv(ROOT / "examples" / "irrigation.csv")
    parts = tmp_path / "parts"
    for k, start in enumerate(range(0, len(frame), 150)):
        (parts / f"batch={k}").mkdir(parents=True)
        frame.iloc[start:start + 150].to_parquet(parts / f"batch={k}" / "p.parquet", index=False)
    (tmp_path / "irrigation.csv").write_bytes((ROOT / "examples" / "irrigation.csv").read_bytes())
    want = run_recipe(written(tmp_path, "irrigation.csv")).runs[0].result.to_dict()
    got = run_recipe(written(tmp_path, "parts", 'engine = "duckdb"')).runs[0].result.to_dict()
    assert got["n"] == want["n"] == len(frame)
    for key in ("estimate", "se", "union_ci", "identified_set"):
        a, b = got[key], want[key]
        flat_a = a if isinstance(a, list) else [a]
        flat_b = b if isinstance(b, list) else [b]
        assert len(flat_a) == len(flat_b)
        for x, y in zip(flat_a, flat_b):
            assert math.isclose(x, y, rel_tol=1e-10)


SUBGROUP = """\
[[study.analysis]]
kind = "calibrate"
no_first_stage_group = "clay"
"""


@pytest.mark.filterwarnings("ignore:the first-stage F in the subgroup")
def test_recipe_zero_first_stage_subgroup_on_the_duckdb_engine(tmp_path):
    """The subgroup of a calibrate analysis is read again on the study's engine (an invented
    0/1 marker of clay soils): the same estimate as the in-memory route of a CSV file."""
    frame = pd.read_csv(ROOT / "examples" / "irrigation.csv")
    frame["clay"] = (frame["soil"] == "clay").astype(int)
    frame.to_csv(tmp_path / "clay.csv", index=False)
    parts = tmp_path / "parts"
    parts.mkdir()
    for k, start in enumerate(range(0, len(frame), 150)):
        frame.iloc[start:start + 150].to_parquet(parts / f"p{k}.parquet", index=False)
    results = []
    for path, engine in (("clay.csv", ""), ("parts", 'engine = "duckdb"')):
        recipe = written(tmp_path, path, engine)
        recipe.write_text(recipe.read_text() + SUBGROUP)
        results.append(run_recipe(recipe).runs[1].result.zero_first_stage.to_dict())
    got, want = results
    assert got["n"] == want["n"] == int(frame["clay"].sum())
    assert got["controls_dropped"] == want["controls_dropped"] == ["soil"]
    for key in ("direct", "se", "contamination"):
        assert got[key]["height_m"] == pytest.approx(want[key]["height_m"], rel=1e-10)


def test_recipe_with_an_unknown_engine_names_the_key(tmp_path):
    (tmp_path / "irrigation.csv").write_bytes((ROOT / "examples" / "irrigation.csv").read_bytes())
    with pytest.raises(InputError, match="engine 'spark'.*numpy, duckdb, dask"):
        run_recipe(written(tmp_path, "irrigation.csv", 'engine = "spark"'))
