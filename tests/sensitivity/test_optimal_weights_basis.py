"""The optimal weighting's pass-2 block in the basis ``[Z̃, X̃, û]``.

Sources beside each check:
* 2SLS normal equations (the controls are among the instruments and regressors, so every
  residual ``u(γ) = û − Mγ`` is orthogonal to them over the rows), common practice, no
  source: the block's maps lie in the span, so a basis is built, and its folded meat equals
  the plain syrk of the ``Z̃ ⊗ [û, M]`` score rows to 1e-12 (random data; weights; two
  treatments; cluster sums);
* common practice, no source: the sweep's JSON is the same with and without the basis (to
  1e-12 relative, except the trade-off and weights that come out of the cone programmes,
  to 1e-7: the solver's iterates react to the last digits of the meat).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from sensiv.core.errors import WeakInstrumentWarning
from sensiv.data import Spec, from_frame
from sensiv.estimation import iv
from sensiv.estimation.moments import score_sums
from sensiv.sensitivity import bounds
from sensiv.sensitivity import optimal_weights as ow


def frame(n=3000, k_z=6, k_x=1, seed=7):
    rng = np.random.default_rng(seed)
    z = rng.normal(size=(n, k_z))
    w = rng.normal(size=(n, 3)) * [1.0, 50.0, 0.01] + [0.0, 1e3, 5.0]
    shock = rng.normal(size=(n, k_x))
    x = z @ rng.uniform(0.2, 0.8, (k_z, k_x)) + 0.4 * w[:, :1] + shock
    y = (1.0 + x @ np.linspace(1.0, 2.0, k_x) + 0.002 * w[:, 1] + shock[:, 0]
         + rng.normal(size=n) * (1 + np.abs(z[:, 0])))
    data = {"y": y, **{f"x{j + 1}": x[:, j] for j in range(k_x)},
            **{f"z{j + 1}": z[:, j] for j in range(k_z)},
            **{f"w{j + 1}": w[:, j] for j in range(3)},
            "wt": rng.uniform(0.3, 3.0, n), "g": rng.integers(0, 60, n)}
    return pd.DataFrame(data)


def spec(k_z, k_x=1, weight=None, cluster=None):
    return Spec(outcome="y", treatments=tuple(f"x{j + 1}" for j in range(k_x)),
                instruments=tuple(f"z{j + 1}" for j in range(k_z)),
                controls=("w1", "w2", "w3"), weight=weight, cluster=cluster)


@pytest.mark.parametrize("k_z,k_x,weight,cluster", [(6, 1, None, None), (6, 1, "wt", None),
                                                    (8, 2, "wt", None), (6, 1, None, "g")])
def test_meat_in_the_basis_equals_the_plain_meat(k_z, k_x, weight, cluster):
    data = frame(k_z=k_z, k_x=k_x)
    source = iv.as_source(from_frame(data, spec(k_z, k_x, weight, cluster)))
    se = "cluster" if cluster else "robust"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        _, pieces, _ = iv.fit_with_pieces(source, se=se, confidence_level=0.95, small=False)
    (block,) = ow.moment_block(pieces, se)
    assert block.basis is not None and block.basis[0].shape[1] == k_z + k_x + 1
    mean = pieces.moments.mean
    found = score_sums(source.chunks(), mean, [block], cluster=bool(cluster)).meats[ow.BLOCK]
    plain = score_sums(source.chunks(), mean, [replace(block, basis=None)],
                       cluster=bool(cluster)).meats[ow.BLOCK]
    assert np.max(np.abs(found - plain)) <= 1e-12 * np.max(np.abs(plain))


def test_no_basis_when_it_saves_nothing():
    data = frame(k_z=6, k_x=2)                 # 9 basis maps: 45 products > 6 * 7 scores
    source = iv.as_source(from_frame(data, spec(6, 2)))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        _, pieces, _ = iv.fit_with_pieces(source, se="robust", confidence_level=0.95,
                                          small=False)
    assert ow.moment_block(pieces, "robust")[0].basis is None


def _numbers(x, path=""):
    if isinstance(x, dict):
        for k, v in x.items():
            yield from _numbers(v, f"{path}/{k}")
    elif isinstance(x, (list, tuple)):
        for v in x:
            yield from _numbers(v, path)
    elif isinstance(x, float):
        yield path, x
    else:
        yield path, x


@pytest.mark.parametrize("weight", [None, "wt"])
def test_sweep_json_is_unchanged_by_the_basis(monkeypatch, weight):
    data = frame(n=2000)

    def run():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", WeakInstrumentWarning)
            return bounds.sweep(from_frame(data, spec(6, weight=weight)),
                                direct=["-0.05:0.05"] * 6, se="robust", points=11).to_dict()

    with_basis = run()
    monkeypatch.setattr(ow, "in_basis", lambda block, spanning, gram: block)
    plain = run()
    assert with_basis["bias_aware_optimal"] is not None
    pairs = list(zip(_numbers(with_basis), _numbers(plain)))
    assert len(pairs) > 50
    for (path, a), (other, b) in pairs:
        assert path == other
        if isinstance(a, float) and isinstance(b, float) and math.isfinite(a):
            solver = "trade_off" in path or "/weights" in path
            assert a == pytest.approx(b, rel=1e-7 if solver else 1e-12, abs=1e-300), path
        else:
            assert a == b, path
