"""``sweep`` and ``prior`` with absorbed fixed effects equal the same analyses with the fixed
effects as indicator columns (sensiv's own text-control expansion, itself checked against
linearmodels with dummy columns in tests/estimation/test_absorb.py), by Frisch–Waugh–Lovell
(common practice, no source); agreement at 1e-8.  Streamed equals in memory (common practice,
no source).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from sensiv.core.errors import WeakInstrumentWarning
from sensiv.data import Spec, from_file
from sensiv.sensitivity import bounds, prior

REL = 1e-8


def simulated(n: int = 700, seed: int = 4) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    f1, f2 = rng.integers(0, 40, n), rng.integers(0, 9, n)
    a = rng.normal(size=40)[f1] + rng.normal(size=9)[f2]
    z1, z2, w1, u = rng.normal(size=(4, n))
    x = z1 + 0.5 * z2 + 0.5 * u + a + rng.normal(size=n)
    y = 0.5 * x + 0.3 * w1 + a + 0.05 * z1 + u
    return pd.DataFrame({"y": y, "x": x, "z1": z1 + 0.3 * a, "z2": z2, "w1": w1,
                         "f1": [f"c{v}" for v in f1], "f2": [f"t{v}" for v in f2],
                         "g": rng.integers(0, 50, n)})


def run_sweep(data, effects, as_dummies, **kwargs):
    controls = ["w1", *effects] if as_dummies else ["w1"]
    spec = Spec("y", ["x"], ["z1", "z2"], controls=controls, cluster="g",
                absorb=() if as_dummies else effects)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        source = from_file(data, spec, chunk_rows=111) if isinstance(data, str) else data
        return bounds.sweep(source, spec, direct=["-0.05:0.05", "-0.02:0.02"], small=True,
                            **kwargs)


def same_interval(a, b):
    for end_a, end_b in ((a.low, b.low), (a.high, b.high)):
        assert end_a == pytest.approx(end_b, rel=REL, abs=1e-12)


@pytest.mark.parametrize("effects", [("f1",), ("f1", "f2")])
def test_sweep_absorbed_equals_dummies(effects):
    frame = simulated()
    got = run_sweep(frame, effects, as_dummies=False)
    ref = run_sweep(frame, effects, as_dummies=True)
    same_interval(got.union_ci, ref.union_ci)
    same_interval(got.identified_set, ref.identified_set)
    if ref.breakdown.scale is None:
        assert got.breakdown.scale is None
    else:
        assert got.breakdown.scale == pytest.approx(ref.breakdown.scale, rel=REL)
    assert got.to_dict()["absorbed"] == dict(zip(effects, (40, 9)[:len(effects)]))
    assert "absorbed" not in ref.to_dict()


@pytest.mark.parametrize("effects", [("f1",), ("f1", "f2")])
def test_sweep_streamed_equals_in_memory(tmp_path, effects):
    frame = simulated()
    path = tmp_path / "d.csv"
    frame.to_csv(path, index=False)
    memory = run_sweep(frame, effects, as_dummies=False)
    streamed = run_sweep(str(path), effects, as_dummies=False)
    same_interval(streamed.union_ci, memory.union_ci)
    same_interval(streamed.identified_set, memory.identified_set)


def test_prior_absorbed_equals_dummies():
    frame = simulated()
    out = []
    for as_dummies in (False, True):
        spec = Spec("y", ["x"], ["z1", "z2"], controls=["w1", "f1"] if as_dummies else ["w1"],
                    absorb=() if as_dummies else ("f1",))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", WeakInstrumentWarning)
            laws = ["normal:0:0.02", "uniform:-0.01:0.01"]
            out.append(prior.prior_analysis(frame, spec, priors=laws, small=True))
    same_interval(out[0].interval, out[1].interval)
    assert out[0].to_dict()["absorbed"] == {"f1": 40}
