"""Two absorbed fixed effects on a streamed file (``sensiv.estimation.absorb_streamed``): the
rows are never held, and every number equals the in-memory absorption of the same rows.

* reference library: linearmodels ``IV2SLS`` with 0/1 dummy columns for both fixed effects
  (first level of each dropped, a constant kept; ``debiased`` as ``small``), 1e-8 on
  coefficients and standard errors — the same check as ``test_absorb.py`` makes in memory;
* streamed equals in memory (coefficients, standard errors, levels counted, singletons, nesting,
  dropped controls) and the singleton iteration on level tables equals the row-wise one:
  common practice, no source.
"""

from __future__ import annotations

import tracemalloc
import warnings

import numpy as np
import pandas as pd
import pytest

from sensiv.core.errors import InputError, WeakInstrumentWarning
from sensiv.data import Spec, from_file
from sensiv.data.source import Chunk
from sensiv.estimation import absorb as fe
from sensiv.estimation import absorb_direct, absorb_tables, iv
from sensiv.estimation import absorb_streamed
from sensiv.estimation.absorbed_source import absorb_source
from sensiv.sensitivity import bounds

REL = 1e-10


@pytest.fixture(autouse=True)
def streamed_whatever_the_size(monkeypatch):
    """Files this small are held in memory; a budget of no bytes streams them."""
    monkeypatch.setattr(absorb_streamed, "two_way_budget", lambda: 0.0)


def simulated(n: int = 3_000, seed: int = 4, levels=(150, 12), singletons: int = 0):
    rng = np.random.default_rng(seed)
    f1 = rng.integers(0, levels[0], n)
    f2 = rng.integers(0, levels[1], n)
    if singletons:
        # levels of f1 met once, and an f2 level met only with them: dropping the first
        # round's singletons of f1 leaves it a singleton of the second round
        f1[:singletons] = levels[0] + np.arange(singletons)
        f2[:singletons] = levels[1] + np.arange(singletons) // 2
        f2[singletons:singletons + 1] = levels[1] + singletons
    a1 = rng.normal(size=f1.max() + 1)[f1]
    a2 = rng.normal(size=f2.max() + 1)[f2]
    z = rng.normal(size=n) + 0.5 * a1
    w1 = rng.normal(size=n) + a2
    u = rng.normal(size=n)
    x = z + 0.5 * u + a1 - a2 + rng.normal(size=n)
    y = 1.0 + 2.0 * x + 0.3 * w1 + a1 - a2 + u * (1 + 0.5 * np.abs(z))
    return pd.DataFrame({"y": y, "x": x, "z": z, "w1": w1, "f1": [f"c{v}" for v in f1],
                         "f2": f2, "g": rng.integers(0, 40, n), "wt": rng.uniform(0.5, 2, n),
                         "by_f2": 0.5 * a2})


def quiet(function, *args, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return function(*args, **kwargs)


def spec_of(effects=("f1", "f2"), se="robust", weight=None, controls=("w1",)):
    return Spec("y", ["x"], ["z"], controls=list(controls), absorb=effects,
                cluster="g" if se == "cluster" else None, weight=weight)


def streamed_and_memory(frame, spec, tmp_path, chunk_rows=331, row_group=500, **fit):
    path = tmp_path / "d.parquet"
    frame.to_parquet(path, row_group_size=row_group)
    source = quiet(absorb_source, from_file(path, spec, chunk_rows=chunk_rows))
    return source, quiet(iv.fit, source, **fit), quiet(iv.fit, frame, spec, **fit)


def assert_same_fit(got, want, rel=REL, direct=True):
    for name in ("x", "w1"):
        if name in want.tsls.names:
            assert got.tsls.value(name) == pytest.approx(want.tsls.value(name), rel=rel)
            assert got.tsls.std_error(name) == pytest.approx(want.tsls.std_error(name), rel=rel)
    assert got.n == want.n
    a, b = got.absorption, want.absorption
    assert (a.levels, a.counted, a.nested, a.n_singletons, a.dropped_controls) == \
        (b.levels, b.counted, b.nested, b.n_singletons, b.dropped_controls)
    if direct:                                      # the direct solve stood after its check
        assert a.iterations == b.iterations == 1
        assert a.tolerance < 1e-12 and b.tolerance < 1e-12


@pytest.mark.parametrize("effects", [("f1", "f2"), ("f2", "f1")])
@pytest.mark.parametrize("se", ["classic", "robust", "cluster"])
@pytest.mark.parametrize("weight", [None, "wt"])
def test_streamed_two_way_equals_in_memory(tmp_path, effects, se, weight):
    frame = simulated(singletons=6)
    spec = spec_of(effects, se, weight)
    source, got, want = streamed_and_memory(frame, spec, tmp_path, se=se, small=True)
    assert source.absorption.streamed and source._cache is None
    assert want.absorption.n_singletons >= 7        # the second round's singleton included
    assert_same_fit(got, want)


def test_streamed_two_way_equals_dummy_columns(tmp_path):
    linearmodels = pytest.importorskip("linearmodels")
    frame = simulated()
    spec = spec_of(se="cluster", weight="wt")
    _, got, _ = streamed_and_memory(frame, spec, tmp_path, se="cluster", small=True)
    dummies = pd.get_dummies(frame[["f1", "f2"]].astype(str), drop_first=True).astype(float)
    exog = pd.concat([frame[["w1"]].assign(const=1.0), dummies], axis=1)
    ref = linearmodels.iv.IV2SLS(frame["y"], exog, frame[["x"]], frame[["z"]],
                                 weights=frame["wt"]).fit(cov_type="clustered",
                                                          clusters=frame["g"], debiased=True)
    for name in ("x", "w1"):
        assert got.tsls.value(name) == pytest.approx(ref.params[name], rel=1e-8)
        assert got.tsls.std_error(name) == pytest.approx(ref.std_errors[name], rel=1e-8)


def test_nested_fixed_effect_and_absorbed_control(tmp_path):
    frame = simulated()
    frame["g"] = frame["f2"]                        # f2 nested in the clusters
    spec = spec_of(se="cluster", controls=("w1", "by_f2"))
    source, got, want = streamed_and_memory(frame, spec, tmp_path, se="cluster", small=True)
    assert source.absorption.streamed
    assert got.absorption.nested == (False, True)
    assert got.absorption.dropped_controls == ("by_f2",)
    assert_same_fit(got, want)


def test_absorbed_instrument_names_its_fixed_effect(tmp_path):
    frame = simulated()
    frame["z"] = frame["by_f2"] * 3.0
    path = tmp_path / "d.parquet"
    frame.to_parquet(path)
    with pytest.raises(InputError, match="instrument 'z' does not vary within 'f2'"):
        absorb_source(from_file(path, spec_of(), chunk_rows=400))


def test_the_rows_are_held_in_memory_where_streaming_cannot_serve(tmp_path, monkeypatch):
    frame = simulated()
    spec = spec_of()
    monkeypatch.setattr(absorb_streamed, "two_way_budget", lambda: 1e12)
    held, _, _ = streamed_and_memory(frame, spec, tmp_path)
    assert not held.absorption.streamed             # within the budget: held in memory
    monkeypatch.setattr(absorb_streamed, "two_way_budget", lambda: 0.0)
    one_chunk, got, want = streamed_and_memory(frame, spec, tmp_path, chunk_rows=10_000,
                                               row_group=10_000)
    assert not one_chunk.absorption.streamed        # one chunk: exactly the in-memory path
    monkeypatch.setattr(absorb_direct, "DIRECT_LEVELS", 5)
    many_levels, got, want = streamed_and_memory(frame, spec, tmp_path)
    assert not many_levels.absorption.streamed      # alternating projections need the rows
    assert_same_fit(got, want, rel=1e-8, direct=False)


def test_sweep_on_the_stream_equals_the_sweep_in_memory(tmp_path):
    frame = simulated(singletons=4)
    spec = spec_of(se="cluster")
    path = tmp_path / "d.parquet"
    frame.to_parquet(path, row_group_size=500)
    got = quiet(bounds.sweep, from_file(path, spec, chunk_rows=331), spec,
                direct=["-0.05:0.05"], se="cluster", points=5)
    want = quiet(bounds.sweep, frame, spec, direct=["-0.05:0.05"], se="cluster", points=5)
    for name in ("identified_set", "union_ci"):
        for end in ("low", "high"):
            assert getattr(getattr(got, name), end) == pytest.approx(
                getattr(getattr(want, name), end), rel=REL)
    for name in ("lower", "upper", "id_lower", "id_upper"):
        np.testing.assert_allclose(getattr(got.curve, name), getattr(want.curve, name),
                                   rtol=REL)
    assert got.breakdown.scale == pytest.approx(want.breakdown.scale, rel=1e-9)


@pytest.mark.parametrize("seed", range(6))
def test_singletons_from_level_tables_equal_the_row_wise_iteration(seed):
    rng = np.random.default_rng(seed)
    n = 400
    f1 = rng.zipf(1.6, n) % 150                     # many rare levels on both sides
    f2 = rng.zipf(1.8, n) % 60
    values = rng.normal(size=(n, 2))
    weights = rng.uniform(0.5, 2.0, n)
    frame = pd.DataFrame({"a": values[:, 0], "b": values[:, 1], "f1": f1, "f2": f2})
    chunks = [Chunk(values[s:s + 97], weights[s:s + 97], None, 0, 0,
                                    (f1[s:s + 97], f2[s:s + 97])) for s in range(0, n, 97)]
    tables = absorb_tables.Tables.empty(("a", "b"))
    for chunk in chunks:
        absorb_tables._add_chunk(tables, chunk)
    tables.finish()
    kept, _, dropped = absorb_tables.drop_singletons(tables)
    codes = [tables.codes[k].labels().get_indexer(frame[f"f{k + 1}"]) for k in range(2)]
    keep = fe.singleton_rows([np.asarray(c) for c in codes])
    assert dropped == int((~keep).sum())
    for k in range(2):
        expected = np.zeros(kept[k].size, dtype=bool)
        expected[codes[k][keep]] = True
        np.testing.assert_array_equal(kept[k], expected)
        # the level sums left are those of the kept rows alone
        shifted = (values - values[0]) * weights[:, None]
        sums = np.zeros((kept[k].size, 2))
        np.add.at(sums, codes[k][keep], shifted[keep])
        np.testing.assert_allclose(tables.sums[k][kept[k]], sums[kept[k]], rtol=1e-12,
                                   atol=1e-12)


def test_a_streamed_two_way_fit_holds_no_copy_of_the_rows(tmp_path):
    n = 200_000
    rng = np.random.default_rng(2)
    frame = pd.DataFrame({"y": rng.normal(size=n), "x": rng.normal(size=n),
                          "z": rng.normal(size=n), "w1": rng.normal(size=n),
                          "f1": rng.integers(0, 2_000, n), "f2": rng.integers(0, 20, n)})
    frame["x"] += frame["z"]
    path = tmp_path / "d.parquet"
    frame.to_parquet(path, row_group_size=20_000)
    rows_bytes = n * 6 * 8                          # the used columns as float64: 9.6 MB
    source = from_file(path, spec_of(), chunk_rows=20_000)
    tracemalloc.start()
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", WeakInstrumentWarning)
            fit = iv.fit(source, spec_of())
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert fit.absorption.streamed
    # held in memory the rows are gathered (measured: 2.8x rows_bytes); streamed, chunks in
    # flight and level tables only (measured: 0.64x)
    assert peak < rows_bytes, peak
