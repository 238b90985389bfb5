"""The direct solve of several fixed effects (``estimation/absorb_direct.py``) and the streamed
one-way first pass (``estimation/absorbed_source.py``) against plain formulas.

* The demeaned columns are the least-squares residuals on every fixed effect's indicators
  (Frisch–Waugh–Lovell), computed here with numpy's ``lstsq`` on explicit dummy columns
  (weighted: rows scaled by the root weights) — common practice, no source.
* The direct solution, the plain alternating projections (``direct_levels=0``) and ``lstsq``
  agree to 1e-10 relative on random data (the round's exactness rule: every speed change keeps
  the results of the plain formula).
* The reported steps and tolerance are truthful: one more sweep of demeaning by each fixed
  effect changes the result by no more than the reported relative change — common practice,
  no source.
* The streamed one-way path decides absorbed columns and nestedness from one reference row
  per level; it must agree with the in-memory path, which decides them from the demeaned
  columns — common practice, no source.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from sensiv.core.errors import InputError, WeakInstrumentWarning
from sensiv.data import Spec, from_file, from_frame
from sensiv.estimation import absorb as fe
from sensiv.estimation import iv
from sensiv.estimation.absorb_direct import direct_plan, direct_residual
from sensiv.estimation.absorbed_source import PIECE_ROWS, absorb_source

REL = 1e-10


def design(n, levels, seed, weighted, disconnect=False):
    rng = np.random.default_rng(seed)
    codes = [rng.integers(0, n_levels, n) for n_levels in levels]
    if disconnect:  # two blocks of levels that never meet: two connected components
        half = n // 2
        codes[0][:half] %= levels[0] // 2
        codes[0][half:] = levels[0] // 2 + codes[0][half:] % (levels[0] - levels[0] // 2)
        codes[1][:half] %= levels[1] // 2
        codes[1][half:] = levels[1] // 2 + codes[1][half:] % (levels[1] - levels[1] // 2)
    codes = [fe.recode(c)[0] for c in codes]
    levels = [int(c.max()) + 1 for c in codes]
    effects = sum(rng.normal(size=n_levels)[c] for c, n_levels in zip(codes, levels))
    values = rng.normal(size=(n, 3)) + effects[:, None] * np.array([1.0, -2.0, 0.5])
    values[:, 2] += 50.0  # a column far from zero
    weights = rng.uniform(0.5, 2.0, n) if weighted else None
    return codes, levels, values, weights


def lstsq_residuals(codes, levels, values, weights):
    dummies = np.hstack([np.eye(n_levels)[c] for c, n_levels in zip(codes, levels)])
    root = np.ones(len(values)) if weights is None else np.sqrt(weights)
    coef = np.linalg.lstsq(dummies * root[:, None], values * root[:, None], rcond=None)[0]
    return values - dummies @ coef


def relative(a, b):
    return np.max(np.abs(a - b)) / np.max(np.abs(b))


CASES = [((40, 6), False), ((40, 6), True), ((60, 12, 5), False), ((60, 12, 5), True),
         ((7, 50), True)]  # the largest fixed effect second


@pytest.mark.parametrize("levels,weighted", CASES)
def test_direct_equals_least_squares_and_projections(levels, weighted):
    codes, levels, values, weights = design(900, levels, 11, weighted)
    expected = lstsq_residuals(codes, levels, values, weights)
    assert direct_plan(codes, levels, weights) is not None
    direct, steps, achieved = fe.demean_columns(np.asfortranarray(values.copy()), codes, levels,
                                                weights)
    plain, plain_steps, _ = fe.demean_columns(np.asfortranarray(values.copy()), codes, levels,
                                              weights, direct_levels=0)
    assert relative(direct, expected) < REL
    assert relative(plain, expected) < 1e-8  # iterated to the default relative 1e-10
    assert relative(direct, plain) < 1e-8
    assert steps == 1 and achieved <= fe.DEFAULT_TOLERANCE and plain_steps > 1


def test_direct_residual_alone_is_the_projection():
    codes, levels, values, weights = design(700, (30, 9), 5, True)
    plan = direct_plan(codes, levels, weights)
    expected = lstsq_residuals(codes, levels, values, weights)
    for j in range(values.shape[1]):
        residual, _ = direct_residual(plan, values[:, j] - values[0, j], weights)
        assert relative(residual, expected[:, j]) < REL


def test_disconnected_levels():
    codes, levels, values, weights = design(1_000, (40, 10), 2, False, disconnect=True)
    assert fe.components(codes[0], levels[0], codes[1], levels[1]) == 2
    expected = lstsq_residuals(codes, levels, values, weights)
    got, steps, _ = fe.demean_columns(np.asfortranarray(values.copy()), codes, levels, weights)
    assert relative(got, expected) < REL and steps == 1


def test_small_effect_nested_in_the_largest():
    # Each level of the small fixed effect lies inside one level of the large one: the small
    # one adds nothing, and its matrix is zero up to rounding.
    codes, levels, values, weights = design(800, (60, 4), 9, True)
    small = codes[0] // 15
    got, _, _ = fe.demean_columns(np.asfortranarray(values.copy()), [codes[0], small],
                                  [levels[0], 4], weights)
    expected = lstsq_residuals([codes[0]], [levels[0]], values, weights)
    assert relative(got, expected) < REL


def test_reported_tolerance_is_truthful():
    codes, levels, values, weights = design(2_000, (80, 20, 6), 4, True)
    got, steps, achieved = fe.demean_columns(np.asfortranarray(values.copy()), codes, levels,
                                             weights)
    groups = [(c, fe.group_weights(c, n, weights)) for c, n in zip(codes, levels)]
    for j in range(values.shape[1]):
        again = got[:, j]
        for c, totals in groups:
            again = fe.demean_once(again, c, totals, weights)
        scale = np.linalg.norm(fe.demean_once(values[:, j], *groups[0], weights))
        assert np.linalg.norm(again - got[:, j]) / scale <= max(achieved, 1e-15) * 1.0001


@pytest.mark.parametrize("levels,weighted,dense", [((80, 9), False, True), ((80, 9), True, True),
                                                    ((9, 80), True, True), ((80, 9), True, False)])
def test_two_way_change_from_level_sums_is_the_sweeps(levels, weighted, dense, monkeypatch):
    # With two fixed effects the change one more sweep would make to a residual with zero
    # level sums on the largest fixed effect is computed from one group sum
    # (absorb_direct.sweep_change); it must equal the change of the sweep itself — here for a
    # column demeaned by the largest fixed effect alone, where the change is far from zero
    # (common practice, no source: the identity of the module notes, checked by the sweep).
    import sensiv.estimation.absorb_direct as direct

    if not dense:
        monkeypatch.setattr(direct, "DENSE_CROSS", 10)  # the CSR cross-tabulations
    codes, levels, values, weights = design(2_000, levels, 8, weighted)
    plan = direct_plan(codes, levels, weights)
    groups = [(c, fe.group_weights(c, n, weights)) for c, n in zip(codes, levels)]
    big = int(np.argmax(levels))
    for j in range(values.shape[1]):
        once = fe.demean_once(values[:, j] - values[0, j], *groups[big], weights)
        actual = np.linalg.norm(fe._sweep(once, groups, weights) - once)
        assert actual > 1.0
        assert direct.sweep_change(plan, once, weights) == pytest.approx(actual, rel=1e-9)
    got, steps, achieved = fe.demean_columns(np.asfortranarray(values.copy()), codes, levels,
                                             weights)
    assert relative(got, lstsq_residuals(codes, levels, values, weights)) < REL
    for j in range(values.shape[1]):  # the reported tolerance is truthful (to rounding:
        again = fe._sweep(got[:, j], groups, weights)  # both sides are 1e-15 here)
        scale = np.linalg.norm(fe.demean_once(values[:, j] - values[0, j], *groups[big],
                                              weights))
        assert np.linalg.norm(again - got[:, j]) / scale <= achieved * 1.0001 + 1e-14
    assert steps == 1


def test_too_many_small_levels_fall_back_to_projections():
    codes, levels, values, weights = design(3_000, (300, 200), 6, False)
    assert direct_plan(codes, levels, weights, limit=100) is None
    got, steps, _ = fe.demean_columns(np.asfortranarray(values.copy()), codes, levels, weights,
                                      direct_levels=100)
    assert relative(got, lstsq_residuals(codes, levels, values, weights)) < 1e-8 and steps > 1


def test_in_memory_pieces_carry_the_counts_once():
    rng = np.random.default_rng(1)
    n = 2 * PIECE_ROWS + 17
    frame = pd.DataFrame({"y": rng.normal(size=n), "x": rng.normal(size=n),
                          "z": rng.normal(size=n), "f1": rng.integers(0, 50, n),
                          "f2": rng.integers(0, 5, n)})
    frame.loc[3, "x"] = np.nan
    source = absorb_source(from_frame(frame, Spec("y", ["x"], ["z"], absorb=["f1", "f2"])))
    pieces = list(source.chunks())
    assert len(pieces) == 3 and sum(p.values.shape[0] for p in pieces) == n - 1
    assert sum(p.n_dropped for p in pieces) == 1


# ----------------------------------------------------------------------------- streamed
def streamed_and_memory(tmp_path, frame, spec, **kwargs):
    path = tmp_path / "d.parquet"
    frame.to_parquet(path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        streamed = iv.fit(from_file(path, spec, chunk_rows=113), **kwargs)
        memory = iv.fit(frame, spec, **kwargs)
    return streamed, memory


def frame_of(n=900, seed=12):
    rng = np.random.default_rng(seed)
    f1 = rng.integers(0, 60, n)
    a = rng.normal(size=60)[f1]
    z = rng.normal(size=n) + a
    x = z + a + rng.normal(size=n)
    return pd.DataFrame({"y": x + a + rng.normal(size=n), "x": x, "z": z, "f1": f1,
                         "w1": rng.normal(size=n), "region": (f1 % 7).astype(float),
                         "grant": (f1 % 5).astype(float), "g": f1 // 4})


def test_streamed_drops_the_same_absorbed_control(tmp_path):
    spec = Spec("y", ["x"], ["z"], controls=["w1", "region"], absorb=["f1"])
    streamed, memory = streamed_and_memory(tmp_path, frame_of(), spec)
    assert streamed.controls == memory.controls == ("w1",)
    assert streamed.tsls.value("x") == pytest.approx(memory.tsls.value("x"), rel=1e-12)


def test_streamed_refuses_an_absorbed_instrument(tmp_path):
    spec = Spec("y", ["x"], ["grant"], absorb=["f1"])
    with pytest.raises(InputError, match="instrument 'grant' does not vary within 'f1'"):
        streamed_and_memory(tmp_path, frame_of(), spec)


def test_streamed_nestedness_matches_memory(tmp_path):
    frame = frame_of()
    nested = Spec("y", ["x"], ["z"], controls=["w1"], absorb=["f1"], cluster="g")
    streamed, memory = streamed_and_memory(tmp_path, frame, nested, small=True)
    assert streamed.absorbed_parameters == memory.absorbed_parameters == 0
    frame["g"] = np.random.default_rng(3).integers(0, 40, len(frame))  # crosses the levels
    streamed, memory = streamed_and_memory(tmp_path, frame, nested, small=True)
    assert streamed.absorbed_parameters == memory.absorbed_parameters == 59
    assert streamed.tsls.std_error("x") == pytest.approx(memory.tsls.std_error("x"), rel=1e-12)


# ----------------------------------------------------------------------------- pass 1 from pass 0
def test_streamed_moments_from_pass_0_equal_the_demeaned_rows(tmp_path):
    # The one-pass within formula against the moments of the demeaned rows themselves (the
    # two-pass formula, moments.accumulate): plain formula, no source.
    from sensiv.estimation.moments import accumulate

    frame = frame_of(n=1_500)
    frame["w1"] += 1e4  # a column far from zero
    frame["wt"] = np.random.default_rng(2).uniform(0.5, 2.0, len(frame))
    frame.loc[[0, 1], "f1"] = [1000, 1001]  # two singleton levels
    path = tmp_path / "d.parquet"
    frame.to_parquet(path)
    for weight in (None, "wt"):
        spec = Spec("y", ["x"], ["z"], controls=["w1"], absorb=["f1"], weight=weight)
        source = absorb_source(from_file(path, spec, chunk_rows=97))
        assert source.moments is not None and source.absorption.n_singletons == 2
        rows = accumulate(source.chunks(), source.layout.columns)
        assert source.moments.n == rows.n == len(frame) - 2
        assert source.moments.relative_difference(rows) < 1e-12


def test_a_fixed_effect_explaining_nearly_everything_demeans_the_rows_first(tmp_path):
    frame = frame_of(n=1_200)
    level_effect = np.random.default_rng(5).normal(size=60)[frame["f1"]] * 1e3
    frame["y"] += level_effect
    spec = Spec("y", ["x"], ["z"], controls=["w1"], absorb=["f1"])
    path = tmp_path / "d.parquet"
    frame.to_parquet(path)
    source = absorb_source(from_file(path, spec, chunk_rows=101))
    assert source.moments is None  # within share of y below WITHIN_SHARE: pass 1 proper
    streamed, memory = streamed_and_memory(tmp_path, frame, spec)
    assert streamed.tsls.value("x") == pytest.approx(memory.tsls.value("x"), rel=1e-12)
    assert streamed.tsls.std_error("x") == pytest.approx(memory.tsls.std_error("x"), rel=1e-12)
