"""Partitioned data sets (directories, globs, hive layouts, CSV parts) read by the numpy
engine give the same source as the whole frame.  Invariants (common practice, no source):
reading in pieces gives the same numbers as reading at once; partition columns are columns."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from sensiv.core.errors import InputError
from sensiv.data import Spec, from_file, from_frame, with_engine
from sensiv.data.datasets import is_dataset
from sensiv.estimation import iv


def frame(n: int = 1200, seed: int = 3) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    z = rng.normal(size=n)
    x = z + rng.normal(size=n)
    return pd.DataFrame({"y": 2 * x + rng.normal(size=n), "x": x, "z": z,
                         "g": rng.integers(0, 25, n),
                         "region": rng.choice(["east", "north", "west"], n),
                         "year": rng.choice([2019, 2020, 2021], n)})


def hive(folder, data: pd.DataFrame, suffix: str = "parquet") -> None:
    for (year, region), sub in data.groupby(["year", "region"]):
        target = folder / f"year={year}" / f"region={region}"
        target.mkdir(parents=True)
        rest = sub.drop(columns=["year", "region"])
        if suffix == "parquet":
            rest.to_parquet(target / "part-0.parquet", index=False)
        else:
            rest.to_csv(target / "part-0.csv", index=False)


SPEC = Spec("y", ["x"], ["z"], controls=["region", "year"], cluster="g",
            where="year >= 2020 and region != 'west'")


@pytest.mark.parametrize("suffix", ["parquet", "csv"])
def test_hive_partitions_are_columns_and_match_the_whole_frame(tmp_path, suffix):
    data = frame()
    hive(tmp_path / "data", data, suffix)
    got = iv.fit(from_file(tmp_path / "data", SPEC)).to_dict()
    want = iv.fit(from_frame(data, SPEC)).to_dict()
    assert (got["n"], got["n_filtered"]) == (want["n"], want["n_filtered"])
    for key in ("coef", "se"):
        for name, value in want[key].items():
            assert got[key][name] == pytest.approx(value, rel=1e-10)


def test_a_glob_reads_the_matching_files_only(tmp_path):
    data = frame()
    hive(tmp_path / "data", data)
    spec = Spec("y", ["x"], ["z"], controls=["region"])
    got = from_file(str(tmp_path / "data" / "year=2020" / "*" / "*.parquet"), spec)
    assert sum(c.values.shape[0] for c in got.chunks()) == int((data["year"] == 2020).sum())


def test_dataset_problems_are_input_errors(tmp_path):
    (tmp_path / "empty").mkdir()
    with pytest.raises(InputError, match="no data files"):
        from_file(tmp_path / "empty", SPEC)
    mixed = tmp_path / "mixed"
    mixed.mkdir()
    frame().to_parquet(mixed / "a.parquet")
    (mixed / "notes.txt").write_text("hello")
    with pytest.raises(InputError, match="several or unknown types"):
        from_file(mixed, SPEC)
    data = tmp_path / "data"
    hive(data, frame())
    last = sorted(data.rglob("*.parquet"))[-1]
    last.write_bytes(b"PAR1 not really")
    with pytest.raises(InputError, match=last.name):
        list(from_file(data, SPEC).chunks())


def test_engine_choice_is_checked():
    source = from_frame(frame(), Spec("y", ["x"], ["z"]))
    with pytest.raises(InputError, match="not an engine"):
        with_engine(source, "spark")
    with pytest.raises(InputError, match="--engine numpy"):
        with_engine(source, "duckdb")           # in-memory frames have no files to read
    assert with_engine(source, "dask").engine == "dask"
    assert is_dataset("a/*.csv") and not is_dataset("a.csv")
