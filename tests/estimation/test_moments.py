"""The moments engine: three sources, one set of moments.

Common practice, no source: the pairwise combination of Chan, Golub & LeVeque (1979) is exact
in exact arithmetic, so in-memory, chunked-file and list-of-chunks moments agree to rounding.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from sensiv.data import Spec, from_chunks, from_file, from_frame
from sensiv.estimation.moments import ScoreBlock, accumulate, chunk_moments, score_sums

TOL = 1e-10  # issue contract: relative difference between sources


def frame(n: int = 3000, seed: int = 2) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    out = pd.DataFrame({
        "y": rng.normal(size=n) * 5 + 3,
        "x": rng.normal(size=n),
        "z": rng.normal(size=n),
        "year": 2000 + rng.integers(0, 20, n).astype(float),  # large mean, small spread
        "cents": rng.normal(size=n) * 100 + 1e8,
        "g": rng.integers(0, 25, n),
        "wt": rng.uniform(0.5, 2.0, n),
    })
    out.loc[rng.choice(n, 40, replace=False), "x"] = np.nan
    return out


SPEC = Spec(outcome="y", treatments=("x",), instruments=("z",), controls=("year", "cents"),
            weight="wt", cluster="g")


def moments_of(source):
    return accumulate(source.chunks(), source.layout.columns)


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_file_chunks_match_in_memory(tmp_path, suffix):
    data = frame()
    path = tmp_path / f"d{suffix}"
    if suffix == ".csv":
        data.to_csv(path, index=False, float_format="%.17g")
    else:
        data.to_parquet(path, row_group_size=500)
    memory = moments_of(from_frame(data, SPEC))
    streamed = moments_of(from_file(path, SPEC, chunk_rows=333))
    assert streamed.n == memory.n == 3000 - 40
    assert streamed.n_dropped == memory.n_dropped == 40
    assert memory.relative_difference(streamed) <= TOL


def test_list_of_chunks_adds_up():
    data = frame()
    memory = moments_of(from_frame(data, SPEC))
    parts = moments_of(from_chunks([data.iloc[:7], data.iloc[7:1200], data.iloc[1200:]], SPEC))
    assert memory.relative_difference(parts) <= TOL
    # explicit addition of separately accumulated moments
    a = moments_of(from_frame(data.iloc[:1000], SPEC))
    b = moments_of(from_frame(data.iloc[1000:], SPEC))
    assert memory.relative_difference(a + b) <= TOL


@settings(max_examples=25, deadline=None)
@given(st.lists(st.integers(min_value=1, max_value=400), min_size=1, max_size=8))
def test_any_split_gives_the_same_moments(sizes):
    data = frame(n=600)
    edges = np.cumsum([0, *sizes])
    edges = edges[edges < len(data)]
    pieces = [data.iloc[a:b] for a, b in zip(edges, [*edges[1:], len(data)])]
    assert moments_of(from_frame(data, SPEC)).relative_difference(
        moments_of(from_chunks(pieces, SPEC))) <= TOL


def test_centred_moments_keep_digits_for_large_means():
    # the centred co-moment of a column with mean 1e8 and SD 100 keeps full precision, where
    # raw cross-products would lose about eleven digits (common practice, no source)
    rng = np.random.default_rng(0)
    x = rng.normal(size=(5000, 1)) * 100 + 1e8
    m = chunk_moments(["c"], x, None)
    exact = np.var(x - 1e8) * len(x)
    assert m.comoment[0, 0] == pytest.approx(exact, rel=1e-12)


def test_score_sums_robust_and_cluster_by_hand():
    # Σ gᵢgᵢ' and Σ_g s_g s_g' against a direct numpy computation (common practice, no source)
    data = frame(n=500).dropna()
    source = from_frame(data, SPEC, chunk_rows=77)
    m = moments_of(source)
    p = len(m.columns)
    rng = np.random.default_rng(1)
    left, right = rng.normal(size=(p + 1, 2)), rng.normal(size=(p + 1, 1))
    block = ScoreBlock("b", left, right)
    values = data[list(source.layout.columns)].to_numpy(float)
    rows = np.column_stack([np.ones(len(values)), values - m.mean])
    g = (rows @ left) * (rows @ right) * data["wt"].to_numpy()[:, None]
    robust = score_sums(source.chunks(), m.mean, [block], cluster=False)
    np.testing.assert_allclose(robust.meats["b"], g.T @ g, rtol=1e-10)
    clustered = score_sums(source.chunks(), m.mean, [block], cluster=True)
    sums = pd.DataFrame(g).groupby(data["g"].to_numpy()).sum().to_numpy()
    np.testing.assert_allclose(clustered.meats["b"], sums.T @ sums, rtol=1e-10)
    assert clustered.n_clusters == data["g"].nunique()
