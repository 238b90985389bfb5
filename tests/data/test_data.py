"""Tests for sensiv.data: reading, role validation, listwise deletion and chunking.

The data here are small invented frames; expected values are counted by hand or derived from
the frame itself (common practice, no source).
"""

from __future__ import annotations

import gzip
import re
import subprocess
import sys
import textwrap

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import sensiv.data.readers as data_module
from sensiv.data import (
    Chunk,
    Layout,
    Spec,
    from_chunks,
    from_file,
    from_frame,
    load,
    read_table,
)
from sensiv.data.readers import DEFAULT_CHUNK_ROWS
from sensiv.core.errors import InputError

N_ROWS = 61
SMALL_CHUNK = 7
FORMATS = ("csv", "csv.gz", "parquet", "dta")


def make_frame(n: int = N_ROWS) -> pd.DataFrame:
    """Invented data with missing values in several used columns and one unused column."""
    rng = np.random.default_rng(20240611)
    frame = pd.DataFrame({
        "y": rng.normal(size=n) * 100.0,
        "x1": rng.normal(size=n),
        "z1": rng.normal(size=n),
        "z2": rng.integers(0, 2, size=n).astype(float),
        "w": rng.normal(size=n) + 1e6,  # large mean, small spread
        "region": rng.choice(["north", "south", "east"], size=n).astype(object),
        "flag": rng.random(n) > 0.5,
        "school": rng.integers(0, 9, size=n),
        "wt": rng.random(n) + 0.5,
        "unused": ["free text"] * n,
    })
    frame.loc[[3, 10, 40], "y"] = np.nan
    frame.loc[[5, 10], "w"] = np.nan
    frame.loc[[12, 50], "region"] = None
    frame.loc[[33], "wt"] = np.nan
    return frame


DROPPED_ROWS = {3, 5, 10, 12, 33, 40, 50}  # union of the missing positions above

SPEC = Spec("y", ["x1"], ["z1", "z2"], controls=["w", "region", "flag"], cluster="school",
            weight="wt")


def write(frame: pd.DataFrame, path, fmt: str) -> None:
    if fmt.startswith("csv"):
        frame.to_csv(path, index=False)
    elif fmt == "parquet":
        frame.to_parquet(path, index=False)
    else:
        frame.to_stata(path, write_index=False)


def stack(source) -> tuple[np.ndarray, np.ndarray | None, np.ndarray | None, int]:
    chunks = list(source.chunks())
    values = np.vstack([c.values for c in chunks])
    weights = None if chunks[0].weights is None else np.concatenate([c.weights for c in chunks])
    clusters = None if chunks[0].clusters is None else np.concatenate(
        [np.asarray(c.clusters, dtype=str) for c in chunks])
    return values, weights, clusters, sum(c.n_dropped for c in chunks)


@pytest.fixture
def frame() -> pd.DataFrame:
    return make_frame()


@pytest.fixture(params=FORMATS)
def data_file(request, tmp_path, frame):
    path = tmp_path / f"data.{request.param}"
    write(frame, path, request.param)
    return path


# --------------------------------------------------------------------------- Spec
def test_spec_accepts_lists_and_strings():
    spec = Spec("y", ["x"], ["z1", "z2"], controls=["w"])
    assert spec.treatments == ("x",) and spec.instruments == ("z1", "z2")
    assert spec.controls == ("w",)
    assert Spec("y", "x", "z").treatments == ("x",)  # a single name is one column, not letters


@pytest.mark.parametrize("kwargs, pattern", [
    ({"treatments": [], "instruments": ["z"]}, "no treatment"),
    ({"treatments": ["x"], "instruments": []}, "no instrument"),
    ({"treatments": ["x1", "x2"], "instruments": ["z"]},
     re.escape("2 treatments need at least 2 instruments; got 1: add an instrument or drop a "
               "treatment")),
    ({"treatments": ["x"], "instruments": ["x"]},
     "'x' is named both as treatment and as instrument"),
    ({"treatments": ["x"], "instruments": ["z", "z"]}, "'z' is named twice as instrument"),
    ({"treatments": ["x"], "instruments": ["z"], "weight": "y"}, "'y' .*outcome and as weight"),
    ({"treatments": ["x"], "instruments": ["z"], "controls": ["w", "x"]},
     "'x' .*treatment and as control"),
    ({"treatments": ["x"], "instruments": [3]}, "non-empty string"),
    ({"treatments": ["x"], "instruments": ["z"], "constant": "yes"}, "constant must be"),
])
def test_spec_errors(kwargs, pattern):
    with pytest.raises(InputError, match=pattern):
        Spec("y", **kwargs)


# --------------------------------------------------------------------------- layout and values
def test_layout_columns_and_categorical(frame):
    source = from_frame(frame, SPEC)
    layout = source.layout
    assert isinstance(layout, Layout)
    # levels sorted as str: east < north < south; the first (east) is dropped
    assert layout.categorical == (("region", ("north", "south")),)
    assert layout.controls == ("w", "region[north]", "region[south]", "flag")
    assert layout.columns == ("y", "x1", "z1", "z2", "w", "region[north]", "region[south]", "flag")
    assert layout.constant is True
    assert from_frame(frame, Spec("y", "x1", "z1", constant=False)).layout.constant is False


def test_values_match_frame_rows(frame):
    values, weights, clusters, dropped = stack(from_frame(frame, SPEC))
    kept = frame.drop(index=sorted(DROPPED_ROWS))
    assert dropped == len(DROPPED_ROWS)
    expected = np.column_stack([
        kept["y"], kept["x1"], kept["z1"], kept["z2"], kept["w"],
        kept["region"] == "north", kept["region"] == "south", kept["flag"],
    ]).astype(float)
    np.testing.assert_array_equal(values, expected)
    np.testing.assert_array_equal(weights, kept["wt"].to_numpy())
    np.testing.assert_array_equal(clusters, kept["school"].astype(str).to_numpy())


def test_chunk_contract(frame):
    for chunk in from_frame(frame, SPEC, chunk_rows=SMALL_CHUNK).chunks():
        assert isinstance(chunk, Chunk)
        assert chunk.values.dtype == np.float64 and chunk.values.flags.f_contiguous
        assert np.isfinite(chunk.values).all()
        assert chunk.weights.dtype == np.float64 and (chunk.weights > 0).all()
        assert len(chunk.values) == len(chunk.weights) == len(chunk.clusters)
        assert len(chunk.values) + chunk.n_dropped <= SMALL_CHUNK


def test_no_weight_no_cluster_gives_none(frame):
    chunk = next(from_frame(frame, Spec("y", "x1", "z1")).chunks())
    assert chunk.weights is None and chunk.clusters is None


def test_weights_and_clusters_follow_rows_after_deletion():
    n = 40
    ids = np.arange(n, dtype=float)
    frame = pd.DataFrame({"y": ids, "x": ids * 2, "z": ids * 3, "wt": ids + 1,
                          "g": [f"g{i}" for i in range(n)]})
    frame.loc[[2, 17, 31], "x"] = np.nan
    frame.loc[[5], "g"] = None
    spec = Spec("y", "x", "z", cluster="g", weight="wt")
    for chunk_rows in (None, 3, 11):
        values, weights, clusters, dropped = stack(from_frame(frame, spec, chunk_rows=chunk_rows))
        assert dropped == 4
        np.testing.assert_array_equal(weights, values[:, 0] + 1)
        np.testing.assert_array_equal(clusters, [f"g{int(i)}" for i in values[:, 0]])


# --------------------------------------------------------------------------- formats and chunks
def test_each_format_gives_the_same_values(data_file, frame):
    expected = stack(from_frame(frame, SPEC))
    got = stack(from_file(data_file, SPEC))
    np.testing.assert_array_equal(got[0], expected[0])
    np.testing.assert_array_equal(got[1], expected[1])
    np.testing.assert_array_equal(got[2], expected[2])
    assert got[3] == expected[3] == len(DROPPED_ROWS)


def test_chunked_file_concatenates_to_in_memory(data_file, frame):
    source = from_file(data_file, SPEC, chunk_rows=SMALL_CHUNK)
    chunks = list(source.chunks())
    assert len(chunks) == -(-N_ROWS // SMALL_CHUNK)
    assert all(len(c.values) + c.n_dropped <= SMALL_CHUNK for c in chunks)
    expected = stack(from_frame(frame, SPEC))
    got = stack(source)
    for left, right in zip(got[:3], expected[:3]):
        np.testing.assert_array_equal(left, right)
    assert got[3] == expected[3]


def test_read_table_then_from_frame_matches_from_file(data_file):
    whole = read_table(data_file)
    assert "unused" in whole.columns and len(whole) == N_ROWS
    np.testing.assert_array_equal(stack(from_frame(whole, SPEC))[0],
                                  stack(from_file(data_file, SPEC, chunk_rows=SMALL_CHUNK))[0])


def test_chunks_are_restartable(data_file):
    source = from_file(data_file, SPEC, chunk_rows=SMALL_CHUNK)
    first = next(source.chunks())  # abandon a pass part-way
    again = list(source.chunks())
    np.testing.assert_array_equal(first.values, again[0].values)
    np.testing.assert_array_equal(stack(source)[0], np.vstack([c.values for c in again]))


def test_load_dispatches(tmp_path, frame):
    path = tmp_path / "d.parquet"
    write(frame, path, "parquet")
    assert load(frame, SPEC).description == "DataFrame"
    assert load(path, SPEC).description == "d.parquet"
    assert len(list(load(str(path), SPEC, chunk_rows=10).chunks())) == 7
    assert len(list(load(frame, SPEC, chunk_rows=10).chunks())) == 7
    assert DEFAULT_CHUNK_ROWS >= N_ROWS  # one chunk by default
    assert len(list(load(path, SPEC).chunks())) == 1


def test_from_chunks_equals_from_frame(frame):
    parts = [frame.iloc[:20], frame.iloc[20:21], frame.iloc[21:]]
    got = stack(from_chunks(parts, SPEC))
    expected = stack(from_frame(frame, SPEC))
    for left, right in zip(got, expected):
        np.testing.assert_array_equal(left, right)


@settings(max_examples=40, deadline=None)
@given(chunk_rows=st.integers(min_value=1, max_value=N_ROWS + 5),
       cuts=st.lists(st.integers(min_value=0, max_value=N_ROWS), max_size=6))
def test_any_chunking_gives_the_same_concatenation(chunk_rows, cuts):
    frame = make_frame()
    expected = stack(from_frame(frame, SPEC))
    by_rows = stack(from_frame(frame, SPEC, chunk_rows=chunk_rows))
    bounds = [0, *sorted(cuts), N_ROWS]
    by_parts = stack(from_chunks([frame.iloc[a:b] for a, b in zip(bounds, bounds[1:])], SPEC))
    for got in (by_rows, by_parts):
        for left, right in zip(got, expected):
            np.testing.assert_array_equal(left, right)


# --------------------------------------------------------------------------- categorical controls
@pytest.mark.parametrize("fmt", ["csv", "parquet", "dta"])
def test_levels_fixed_across_chunks_even_when_a_chunk_lacks_one(tmp_path, fmt):
    frame = pd.DataFrame({"y": np.arange(12.0), "x": np.arange(12.0) ** 2,
                          "z": np.arange(12.0) % 5,
                          "kind": ["b"] * 4 + ["a"] * 4 + ["c"] * 4})
    path = tmp_path / f"k.{fmt}"
    write(frame, path, fmt)
    spec = Spec("y", "x", "z", controls=["kind"])
    source = from_file(path, spec, chunk_rows=4)
    assert source.layout.controls == ("kind[b]", "kind[c]")
    chunks = list(source.chunks())
    assert [c.values.shape for c in chunks] == [(4, 5)] * 3
    np.testing.assert_array_equal(chunks[1].values[:, 3:], 0.0)  # chunk of the dropped level
    np.testing.assert_array_equal(chunks[2].values[:, 4], 1.0)


def test_levels_come_from_rows_kept_after_deletion():
    frame = pd.DataFrame({"y": [1.0, np.nan, 3.0, 4.0], "x": [1.0, 2.0, 0.0, 5.0],
                          "z": [0.0, 1.0, 1.0, 0.0], "kind": ["p", "a", "q", "p"]})
    source = from_frame(frame, Spec("y", "x", "z", controls=["kind"]))
    assert source.layout.categorical == (("kind", ("q",)),)  # 'a' only on a dropped row


def test_numeric_looking_text_codes_are_categorical():
    frame = pd.DataFrame({"y": [1.0, 2.0, 3.0, 4.0], "x": [1.0, 0.0, 3.0, 5.0],
                          "z": [2.0, 1.0, 0.0, 1.0], "code": ["10", "02", "2", "02"]})
    layout = from_frame(frame, Spec("y", "x", "z", controls=["code"])).layout
    assert layout.controls == ("code[10]", "code[2]")  # '02' < '10' < '2' as strings


def test_pandas_category_and_string_dtypes_are_categorical():
    frame = pd.DataFrame({"y": [1.0, 2.0, 3.0], "x": [1.0, 0.0, 3.0], "z": [2.0, 1.0, 0.0],
                          "c": pd.Categorical(["u", "v", "u"]),
                          "s": pd.array(["m", "n", "n"], dtype="string")})
    layout = from_frame(frame, Spec("y", "x", "z", controls=["c", "s"])).layout
    assert layout.controls == ("c[v]", "s[n]")


def test_bool_control_is_numeric_zero_one():
    frame = pd.DataFrame({"y": [1.0, 2.0, 3.0], "x": [1.0, 0.0, 3.0], "z": [2.0, 1.0, 0.0],
                          "b": pd.array([True, None, False], dtype="boolean")})
    values, *_ , dropped = stack(from_frame(frame, Spec("y", "x", "z", controls=["b"])))
    np.testing.assert_array_equal(values[:, 3], [1.0, 0.0])
    assert dropped == 1


def test_empty_string_counts_as_missing_in_text_columns():
    frame = pd.DataFrame({"y": [1.0, 2.0, 3.0, 4.0], "x": [1.0, 0.0, 3.0, 2.0],
                          "z": [2.0, 1.0, 0.0, 1.0], "c": ["u", "", "v", "u"]})
    chunk = next(from_frame(frame, Spec("y", "x", "z", controls=["c"])).chunks())
    assert chunk.n_dropped == 1


def test_stata_value_labels_are_not_applied(tmp_path):
    frame = pd.DataFrame({"y": [1.0, 2.0, 3.0, 5.0], "x": np.array([0, 1, 1, 0], dtype=np.int8),
                          "z": [0.5, 1.5, 1.0, 0.0]})
    path = tmp_path / "lab.dta"
    frame.to_stata(path, write_index=False, value_labels={"x": {0: "no", 1: "yes"}})
    values = stack(from_file(path, Spec("y", "x", "z")))[0]
    np.testing.assert_array_equal(values[:, 1], [0.0, 1.0, 1.0, 0.0])


def test_single_level_control_is_an_error():
    frame = pd.DataFrame({"y": [1.0, np.nan, 3.0], "x": [1.0, 0.0, 3.0], "z": [2.0, 1.0, 0.0],
                          "c": ["u", "v", "u"]})
    with pytest.raises(InputError, match="control 'c' .*single value 'u'.*remove it"):
        from_frame(frame, Spec("y", "x", "z", controls=["c"]))


def test_unused_awkward_column_is_not_read(tmp_path, frame):
    frame = frame.assign(nested=[[1, 2]] * N_ROWS)  # a list column pandas cannot make numeric
    path = tmp_path / "n.parquet"
    write(frame, path, "parquet")
    assert stack(from_file(path, SPEC, chunk_rows=SMALL_CHUNK))[3] == len(DROPPED_ROWS)


# --------------------------------------------------------------------------- path and file errors
def test_missing_file(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        from_file(tmp_path / "nope.csv", SPEC)


def test_directory_given(tmp_path):
    with pytest.raises(InputError, match="is a directory"):
        read_table(tmp_path)


def test_unsupported_suffix_lists_accepted(tmp_path):
    path = tmp_path / "data.xlsx"
    path.write_text("y\n1\n")
    accepted = r"unsupported file type '\.xlsx'.*\.csv.*\.parquet.*\.dta"
    with pytest.raises(InputError, match=accepted):
        from_file(path, SPEC)


@pytest.mark.parametrize("name, content", [
    ("bad.parquet", b"this is not parquet"),
    ("bad.dta", b"this is not a stata file at all" * 4),
    ("bad.csv.gz", b"not gzip"),
    ("bad.csv", b'y,x\n1,"unterminated\n'),
])
def test_unreadable_file(tmp_path, name, content):
    path = tmp_path / name
    path.write_bytes(content)
    with pytest.raises(InputError, match=f"could not read '{re.escape(name)}'") as info:
        load(path, Spec("y", "x", "z"))
    assert info.value.__cause__ is not None


@pytest.mark.parametrize("fmt", ["csv", "parquet", "dta"])
def test_file_without_rows(tmp_path, fmt):
    path = tmp_path / f"empty.{fmt}"
    write(pd.DataFrame({"y": [], "x": [], "z": []}, dtype=float), path, fmt)
    with pytest.raises(InputError, match="no data rows"):
        from_file(path, Spec("y", "x", "z"))
    with pytest.raises(InputError, match="no data rows"):
        read_table(path)


def test_empty_csv(tmp_path):
    path = tmp_path / "zero.csv"
    path.write_bytes(b"")
    with pytest.raises(InputError, match="'zero.csv' is empty"):
        from_file(path, Spec("y", "x", "z"))
    gz = tmp_path / "zero.csv.gz"
    gz.write_bytes(gzip.compress(b""))
    with pytest.raises(InputError, match="is empty"):
        read_table(gz)


def test_empty_frame():
    with pytest.raises(InputError, match="DataFrame has no data rows"):
        from_frame(pd.DataFrame({"y": [], "x": [], "z": []}), Spec("y", "x", "z"))


# --------------------------------------------------------------------------- column errors
def test_unknown_column_suggests_close_name(tmp_path):
    frame = pd.DataFrame({"wage": [1.0, 2.0], "educ_yrs": [1.0, 3.0], "qob": [1.0, 0.0]})
    path = tmp_path / "data.csv"
    write(frame, path, "csv")
    message = (r"treatment column 'educ' not found in data.csv; did you mean 'educ_yrs'\? "
               r"available: 'wage', 'educ_yrs', 'qob'")
    with pytest.raises(InputError, match=message):
        from_file(path, Spec("wage", "educ", "qob"))
    with pytest.raises(InputError, match="did you mean 'qob'"):
        from_frame(frame, Spec("wage", "educ_yrs", "QOB"))


def test_unknown_columns_all_reported(frame):
    with pytest.raises(InputError, match="outcome column 'why'.*instrument column 'zz' not found "
                                         "in DataFrame; available: 'y', 'x1'"):
        from_frame(frame, Spec("why", "x1", "zz"))


def test_duplicate_column_label_in_frame():
    frame = pd.DataFrame([[1.0, 2.0, 3.0, 4.0]], columns=["y", "x", "z", "z"])
    with pytest.raises(InputError, match="'z' appears 2 times"):
        from_frame(frame, Spec("y", "x", "z"))


def test_missing_column_in_one_of_several_frames(frame):
    with pytest.raises(InputError, match="'wt' not found in DataFrame chunks"):
        from_chunks([frame, frame.drop(columns="wt")], SPEC)


@pytest.mark.parametrize("role_kwargs, column", [
    ({"outcome": "bad"}, "bad"), ({"treatments": ["bad"]}, "bad"),
    ({"instruments": ["bad"]}, "bad"), ({"weight": "bad"}, "bad"),
])
def test_non_numeric_column_names_example_value(role_kwargs, column):
    frame = pd.DataFrame({"y": [1.0, 2.0, 3.0], "x": [1.0, 0.0, 3.0], "z": [2.0, 1.0, 0.0],
                          "bad": ["1.5", "n/a", "2"]})
    kwargs = {"outcome": "y", "treatments": ["x"], "instruments": ["z"]} | role_kwargs
    with pytest.raises(InputError, match=f"'{column}' in DataFrame is not numeric: data row 2 "
                                         "holds 'n/a'"):
        from_frame(frame, Spec(**kwargs))


def test_numbers_stored_as_text_are_refused():
    frame = pd.DataFrame({"y": ["1.5", "2"], "x": [1.0, 0.0], "z": [2.0, 1.0]})
    with pytest.raises(InputError, match="outcome 'y' .*numbers stored as text.*to_numeric"):
        from_frame(frame, Spec("y", "x", "z"))


def test_datetime_control_is_refused():
    frame = pd.DataFrame({"y": [1.0, 2.0], "x": [1.0, 0.0], "z": [2.0, 1.0],
                          "d": pd.to_datetime(["2020-01-01", "2021-01-01"])})
    with pytest.raises(InputError, match="control 'd' .*neither numeric nor text"):
        from_frame(frame, Spec("y", "x", "z", controls=["d"]))


def test_non_numeric_value_in_a_later_csv_chunk(tmp_path, monkeypatch):
    rows = ["y,x,z"] + [f"{i},{i % 3},{i % 4}" for i in range(30)] + ["7,oops,1"]
    path = tmp_path / "late.csv"
    path.write_text("\n".join(rows) + "\n")
    message = "treatment 'x' in late.csv is not numeric: data row 31 holds 'oops'"
    with pytest.raises(InputError, match=message):  # within the type sample: found at once
        from_file(path, Spec("y", "x", "z"), chunk_rows=10)
    monkeypatch.setattr(data_module, "TYPE_SAMPLE_ROWS", 10)
    source = from_file(path, Spec("y", "x", "z"), chunk_rows=10)  # first rows look fine
    with pytest.raises(InputError, match=message):
        list(source.chunks())


def test_infinite_values_named_and_counted(frame):
    frame.loc[[7, 9], "z1"] = np.inf
    frame.loc[20, "z1"] = -np.inf
    with pytest.raises(InputError, match=r"instrument 'z1' .*3 infinite value\(s\) \(first at "
                                         "data row 8\\).*recode"):
        from_frame(frame, SPEC)


def test_infinite_values_in_csv(tmp_path):
    path = tmp_path / "inf.csv"
    path.write_text("y,x,z\n1,2,3\n2,inf,1\n3,1,2\n")
    with pytest.raises(InputError, match="treatment 'x' in inf.csv has 1 infinite"):
        list(from_file(path, Spec("y", "x", "z")).chunks())


@pytest.mark.parametrize("fill", [np.nan, None])
def test_nan_only_column(frame, fill):
    frame["z2"] = fill
    with pytest.raises(InputError, match="instrument 'z2' .*no non-missing values.*NaN-only"):
        from_frame(frame, SPEC)


def test_nan_only_column_found_at_end_of_stream(tmp_path):
    path = tmp_path / "hole.parquet"
    write(pd.DataFrame({"y": [1.0, 2.0, 3.0], "x": [1.0, 0.0, 3.0], "z": [np.nan] * 3}),
          path, "parquet")
    source = from_file(path, Spec("y", "x", "z"), chunk_rows=2)
    with pytest.raises(InputError, match="NaN-only"):
        list(source.chunks())


@pytest.mark.parametrize("bad, count, example", [([0.0], 1, "0"), ([-2.0, 0.0], 2, "-2")])
def test_non_positive_weights(frame, bad, count, example):
    frame.loc[range(len(bad)), "wt"] = bad
    with pytest.raises(InputError, match=f"weight 'wt' .*{count} zero or negative value\\(s\\) "
                                         f"\\(e.g. {example} at data row 1\\)"):
        from_frame(frame, SPEC)


def test_no_rows_left():
    frame = pd.DataFrame({"y": [1.0, np.nan, 3.0], "x": [np.nan, 0.0, np.nan],
                          "z": [2.0, 1.0, 0.0]})
    with pytest.raises(InputError, match="no rows left in DataFrame after dropping all 3 rows.*"
                                         "'x' \\(2 missing\\)"):
        from_frame(frame, Spec("y", "x", "z"))


def test_indicator_name_clash():
    frame = pd.DataFrame({"y": [1.0, 2.0, 3.0], "x": [1.0, 0.0, 3.0], "z": [2.0, 1.0, 0.0],
                          "c": ["u", "v", "u"], "c[v]": [1.0, 2.0, 2.0]})
    with pytest.raises(InputError, match="clash"):
        from_frame(frame, Spec("y", "x", "z", controls=["c", "c[v]"]))


@pytest.mark.parametrize("value", [0, -3, 2.5, True])
def test_bad_chunk_rows(frame, value):
    with pytest.raises(InputError, match="chunk_rows must be a positive integer"):
        from_frame(frame, SPEC, chunk_rows=value)


def test_bad_containers():
    with pytest.raises(InputError, match="non-empty list of DataFrames"):
        from_chunks([], SPEC)
    with pytest.raises(InputError, match=r"frames\[1\] must be a pandas DataFrame"):
        from_chunks([make_frame(), {"y": 1}], SPEC)
    with pytest.raises(InputError, match="expected a file path; got int"):
        load(3, SPEC)


# --------------------------------------------------------------------------- resources
def _run(code: str, *args: str) -> str:
    result = subprocess.run([sys.executable, "-c", textwrap.dedent(code), *args],
                            capture_output=True, text=True, check=True)
    return result.stdout


def test_import_is_light():
    out = _run("""
        import sys
        import sensiv.data
        print(sorted(m for m in ("pandas", "pyarrow", "scipy") if m in sys.modules))
    """)
    assert out.strip() == "[]"


def test_parquet_streaming_memory_does_not_grow_with_rows(tmp_path):
    # Peak of pyarrow's allocator while streaming 40 row groups, in a fresh process; reading
    # the whole file at once would need about the frame's size.
    out = _run("""
        import sys
        import numpy as np, pandas as pd, pyarrow as pa
        import sensiv.data as data
        import sensiv.data.readers as readers
        readers.TYPE_SAMPLE_ROWS = 1000
        n, groups = 200_000, 40
        rng = np.random.default_rng(0)
        frame = pd.DataFrame({c: rng.normal(size=n) for c in "yxzw"})
        frame.to_parquet(sys.argv[1], row_group_size=n // groups)
        spec = data.Spec("y", "x", "z", ["w"])
        source = data.from_file(sys.argv[1], spec, chunk_rows=n // groups)
        rows = sum(len(chunk.values) for chunk in source.chunks())
        print(rows, pa.default_memory_pool().max_memory(), frame.memory_usage().sum())
    """, str(tmp_path / "big.parquet"))
    rows, peak, size = map(int, out.split())
    assert rows == 200_000
    assert peak < size / 3  # measured ~1/6 streaming, ~4/3 with pyarrow pre-buffering


# ------------------------------------------------------------------ repeated names, scale
def test_csv_header_repeating_a_name_is_refused_naming_it(tmp_path):
    # pandas would rename the second 'x' to 'x.1' and the first would be used silently
    path = tmp_path / "dup.csv"
    path.write_text("y,x,z,x\n1,2,3,4\n2,3,1,5\n3,1,2,7\n")
    for read in (lambda: from_file(path, Spec("y", ("x",), ("z",))), lambda: read_table(path)):
        with pytest.raises(InputError, match=r"repeats column name\(s\) 'x' \(2 times\)"):
            read()
    path.write_text("y,x,z,x.1\n1,2,3,4\n2,3,1,5\n3,1,2,7\n")  # distinct names: fine
    assert list(read_table(path).columns) == ["y", "x", "z", "x.1"]


@pytest.mark.parametrize("scale, fragment", [(1e160, "up to 1e+150"), (1e300, "up to 1e+150"),
                                             (1e-200, "below 1e-150")])
def test_values_beyond_double_precision_are_out_of_range_not_constant(scale, fragment):
    frame = make_frame()
    frame["y"] = frame["y"] * scale
    with pytest.raises(InputError) as info:
        load(from_frame(frame, Spec("y", ("x1",), ("z1",))))
    assert "out of the range" in str(info.value) and fragment in str(info.value)
    assert "constant" not in str(info.value)
