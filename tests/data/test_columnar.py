"""Tests for sensiv.data.columnar: the fast path from plain numeric columns (frames' numpy
columns, Parquet's Arrow columns) to clean chunks gives exactly the chunks of the general
path (through pandas), raises the same errors, and reads ahead without changing either.

The data are random invented frames; the expected chunks are those of the general path on
the same data and pandas' own ``dropna`` + ``to_numpy(float64)`` of the used columns
(reference library: pandas), compared bit for bit (common practice, no source).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import sensiv.data.datasets as datasets
import sensiv.data.readers as readers
from sensiv.core.errors import InputError
from sensiv.core.limits import MAX_MAGNITUDE
from sensiv.data import Spec, from_file, from_frame
from sensiv.data.columnar import plainly_finite
from sensiv.data.convert import check_scale
from sensiv.estimation.moments import accumulate

SPEC = Spec("y", ["x"], ["z"], controls=["a", "b", "c", "d"])
WEIGHTED = Spec("y", ["x"], ["z"], controls=["a", "b", "d"], weight="w")
LABELLED = Spec("y", ["x"], ["z"], controls=["a", "b", "d"], weight="w", cluster="c",
                absorb=("f", "c"))                   # a cluster that is also absorbed
TWO_WAY = Spec("y", ["x"], ["z"], controls=["a", "d"], cluster=("c", "f"), absorb=("f",))


def random_frame(seed: int, n: int = 1_003, missing: bool = True) -> pd.DataFrame:
    """Floats, integers, booleans and float32; NaN scattered in several columns."""
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({
        "y": rng.standard_normal(n) * 3 + 100,
        "x": rng.standard_normal(n),
        "z": rng.integers(-5, 6, n),                      # int64
        "a": rng.random(n) < 0.4,                          # bool
        "b": rng.standard_normal(n).astype(np.float32),    # float32
        "c": rng.integers(0, 20, n).astype(np.uint8),     # uint8
        "d": rng.standard_normal(n) * 1e6,
        "w": rng.random(n) + 0.1,
        "f": rng.integers(0, 30, n) * 1_000_003,          # int64 labels far beyond any scale
        "unused": ["text"] * n,
    })
    if missing:
        for name, share in (("y", 0.02), ("x", 0.05), ("d", 0.01), ("w", 0.03)):
            frame.loc[rng.random(n) < share, name] = np.nan
    return frame


def general_source(monkeypatch, read, *args, **kwargs):
    """The same reader with the fast path switched off (the general path through pandas)."""
    with monkeypatch.context() as patch:
        patch.setattr(readers, "_frame_columns", lambda *a: None)
        patch.setattr(readers, "_parquet_columns", lambda *a: None)
        patch.setattr(datasets, "_dataset_columns", lambda *a: None)
        return read(*args, **kwargs)


def assert_same_chunks(fast, general):
    assert fast._columns is not None and general._columns is None
    left, right = list(fast.chunks()), list(general.chunks())
    assert len(left) == len(right)
    for a, b in zip(left, right):
        assert a.values.flags.f_contiguous and a.values.dtype == np.float64
        np.testing.assert_array_equal(a.values, b.values)          # bit for bit
        assert (a.weights is None) == (b.weights is None)
        if a.weights is not None:
            np.testing.assert_array_equal(a.weights, b.weights)
        assert (a.n_dropped, a.n_filtered) == (b.n_dropped, b.n_filtered)
        assert (a.clusters is None) == (b.clusters is None)
        if a.clusters is not None:                     # the same labels, row for row
            np.testing.assert_array_equal(a.clusters, b.clusters)
        assert (a.groups is None) == (b.groups is None)
        for x, y in zip(a.groups or (), b.groups or ()):
            np.testing.assert_array_equal(x, y)
    m_fast = accumulate(fast.chunks(), fast.layout.columns)
    m_general = accumulate(general.chunks(), general.layout.columns)
    assert (m_fast.n, m_fast.n_dropped) == (m_general.n, m_general.n_dropped)
    np.testing.assert_array_equal(m_fast.mean, m_general.mean)
    np.testing.assert_array_equal(m_fast.comoment, m_general.comoment)


@pytest.mark.parametrize("seed", [1, 2, 3])
@pytest.mark.parametrize("spec", [SPEC, WEIGHTED, LABELLED, TWO_WAY])
@pytest.mark.parametrize("chunk_rows", [None, 97])
def test_frame_fast_path_gives_the_general_chunks(monkeypatch, seed, spec, chunk_rows):
    frame = random_frame(seed)
    fast = from_frame(frame, spec, chunk_rows=chunk_rows)
    general = general_source(monkeypatch, from_frame, frame, spec, chunk_rows=chunk_rows)
    assert_same_chunks(fast, general)
    # reference library: pandas (listwise deletion and float64 conversion of the columns)
    used = list(dict.fromkeys([*fast.layout.columns, *([spec.weight] if spec.weight else [])]))
    expected = frame[used].dropna()
    values = np.vstack([c.values for c in fast.chunks()])
    np.testing.assert_array_equal(values, expected[list(fast.layout.columns)]
                                  .to_numpy(dtype=np.float64))


def write_parquet(path, frame: pd.DataFrame, row_group_size: int = 300) -> None:
    """Nulls (not NaN) for missing values, an int column with nulls, a nullable boolean, and
    a dictionary-encoded text column."""
    table = pa.Table.from_pandas(frame, preserve_index=False)
    n = len(frame)
    rng = np.random.default_rng(7)
    nulls = rng.random(n) < 0.04
    z = pa.array(frame["z"].to_numpy(), mask=nulls)            # int64 with nulls
    a = pa.array(frame["a"].to_numpy(), mask=rng.random(n) < 0.03)   # bool with nulls
    f = pa.array(frame["f"].to_numpy(), mask=rng.random(n) < 0.03)   # labels with nulls
    table = table.set_column(table.schema.get_field_index("z"), "z", z)
    table = table.set_column(table.schema.get_field_index("a"), "a", a)
    table = table.set_column(table.schema.get_field_index("f"), "f", f)
    levels = pa.array(np.array(["p", "q", "r"])[rng.integers(0, 3, n)]).dictionary_encode()
    table = table.append_column("g", levels)
    pq.write_table(table, path, row_group_size=row_group_size)


@pytest.mark.parametrize("seed", [4, 5])
@pytest.mark.parametrize("spec", [SPEC, WEIGHTED, LABELLED, TWO_WAY])
@pytest.mark.parametrize("chunk_rows", [100_000, 128])
def test_parquet_fast_path_gives_the_general_chunks(tmp_path, monkeypatch, seed, spec,
                                                     chunk_rows):
    path = tmp_path / "data.parquet"
    write_parquet(path, random_frame(seed))
    fast = from_file(path, spec, chunk_rows=chunk_rows)
    general = general_source(monkeypatch, from_file, path, spec, chunk_rows=chunk_rows)
    assert_same_chunks(fast, general)


@pytest.mark.parametrize("spec", [WEIGHTED, LABELLED, TWO_WAY,
                                  Spec("y", ["x"], ["z"], controls=["a"], cluster="part")])
def test_partitioned_parquet_fast_path_gives_the_general_chunks(tmp_path, monkeypatch, spec):
    frame = random_frame(8)
    for part in range(3):                     # hive partitions: part=0, part=1, part=2
        folder = tmp_path / "set" / f"part={part}"
        folder.mkdir(parents=True)
        write_parquet(folder / "piece.parquet", frame.iloc[part::3].reset_index(drop=True),
                      row_group_size=90)
    fast = from_file(tmp_path / "set", spec, chunk_rows=64)
    general = general_source(monkeypatch, from_file, tmp_path / "set", spec, chunk_rows=64)
    assert_same_chunks(fast, general)


def test_dictionary_and_text_columns_take_the_general_path(tmp_path):
    path = tmp_path / "data.parquet"
    write_parquet(path, random_frame(6))
    with_text = Spec("y", ["x"], ["z"], controls=["a", "g"])
    assert from_file(path, with_text)._columns is None
    assert from_file(path, Spec("y", ["x"], ["z"], cluster="g"))._columns is None
    assert from_file(path, Spec("y", ["x"], ["z"], absorb=("g",)))._columns is None
    # numbers as labels (clusters, fixed effects) take the fast path
    assert from_file(path, Spec("y", ["x"], ["z"], cluster="c", absorb=("f",)))._columns \
        is not None
    assert from_file(path, Spec("y", ["x"], ["z"], where="d > 0"))._columns is None
    frame = random_frame(6)
    frame["e"] = pd.array(np.arange(len(frame)) % 5, dtype="Int64")   # an extension dtype
    assert from_frame(frame, Spec("y", ["x"], ["z"], controls=["e"]))._columns is None
    assert from_frame(frame, SPEC)._columns is not None


BAD_VALUES = [
    ("x", np.inf, "infinite"),
    ("d", -np.inf, "infinite"),
    ("y", 1e160, "out of the range"),
    ("w", -1.0, "zero or negative"),
    ("w", 0.0, "zero or negative"),
]


@pytest.mark.parametrize("column, value, words", BAD_VALUES)
@pytest.mark.parametrize("fmt", ["frame", "parquet"])
def test_the_same_errors_on_both_paths(tmp_path, monkeypatch, column, value, words, fmt):
    frame = random_frame(8, missing=False)
    frame.loc[[700, 950], column] = value          # in a later chunk of 128 rows
    if fmt == "parquet":
        path = tmp_path / "data.parquet"
        frame.to_parquet(path, index=False)
        read, args = from_file, (path, WEIGHTED)
    else:
        read, args = from_frame, (frame, WEIGHTED)
    with pytest.raises(InputError) as fast:
        list(read(*args, chunk_rows=128).chunks())
    with pytest.raises(InputError) as general:
        list(general_source(monkeypatch, read, *args, chunk_rows=128).chunks())
    assert str(fast.value) == str(general.value)
    assert words in str(fast.value) and "data row 701" in str(fast.value)


def test_tiny_and_nan_only_columns_raise_as_before(monkeypatch):
    frame = random_frame(9, missing=False)
    frame["d"] = 1e-160 * np.sign(frame["d"])          # non-zero but all below 1/MAX
    tiny = [from_frame, general_source]
    messages = []
    for make in tiny:
        with pytest.raises(InputError) as caught:
            if make is from_frame:
                from_frame(frame, SPEC)
            else:
                make(monkeypatch, from_frame, frame, SPEC)
        messages.append(str(caught.value))
    assert messages[0] == messages[1] and "below" in messages[0]
    frame = random_frame(9, missing=False)
    frame["d"] = np.nan
    with pytest.raises(InputError, match="no non-missing values"):
        from_frame(frame, SPEC)


def test_streamed_error_is_raised_when_its_chunk_is_reached(tmp_path):
    """Reading ahead must not raise a later chunk's error early."""
    frame = random_frame(10, missing=False)
    frame.loc[500, "x"] = np.inf
    path = tmp_path / "data.parquet"
    frame.to_parquet(path, index=False)
    chunks = from_file(path, SPEC, chunk_rows=100).chunks()
    got = [next(chunks) for _ in range(5)]                 # rows 1-500 are clean
    assert sum(len(c.values) for c in got) == 500
    with pytest.raises(InputError, match="data row 501"):
        next(chunks)


@pytest.mark.parametrize("seed", range(20))
def test_plainly_finite_never_passes_what_the_full_checks_refuse(seed):
    """The one-dot-product test is sufficient: whenever it passes, the column has no NaN or
    infinite value and passes check_scale (common practice, no source)."""
    rng = np.random.default_rng(seed)
    n = int(rng.integers(1, 2_000))
    scale = 10.0 ** rng.uniform(-170, 170)
    column = rng.standard_normal(n) * scale
    if seed % 4 == 0:
        column[rng.integers(0, n)] = rng.choice([np.nan, np.inf, MAX_MAGNITUDE * 2])
    if plainly_finite(column):
        assert np.isfinite(column).all()
        check_scale(column, "column", 0)                   # does not raise
    if 1e-140 < scale < 1e140 and seed % 4:
        assert plainly_finite(column)                      # ordinary data take the fast path


def test_a_frame_source_keeps_no_copy_of_the_rows():
    """A frame of plain numeric columns is validated once and re-read from its own arrays at
    every pass: after construction the source holds no float64 copy of the used columns
    (measured with tracemalloc, which sees numpy's allocations), and every pass gives the
    same chunks bit for bit.  Common practice, no source."""
    import tracemalloc

    rng = np.random.default_rng(11)
    n = 200_000
    frame = pd.DataFrame({name: rng.standard_normal(n) for name in ("y", "x", "z", "w1")})
    spec = Spec("y", ["x"], ["z"], ["w1"])
    used_bytes = n * 5 * 8                                   # four columns and the constant
    tracemalloc.start()
    try:
        source = from_frame(frame, spec, chunk_rows=50_000)
        held, _ = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert source.in_memory
    assert held < 0.1 * used_bytes, held
    first, second = list(source.chunks()), list(source.chunks())
    assert [len(c.values) for c in first] == [50_000] * 4
    for a, b in zip(first, second):
        np.testing.assert_array_equal(a.values, b.values)
    np.testing.assert_array_equal(np.vstack([c.values for c in first])[:, :4],
                                  frame[["y", "x", "z", "w1"]].to_numpy())
