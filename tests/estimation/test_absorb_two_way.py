"""Absorbed fixed effects together with two-way clustered covariances.

Outside check: the CGM combination of three one-way clustered fits of the reference library
(linearmodels 7.1) with the fixed effects as indicator columns.  The nested count
of absorbed levels under two-way clusters (a fixed effect nested in either cluster variable
counts nothing) is common practice, no source.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from sensiv.core.errors import FewClustersWarning, WeakInstrumentWarning
from sensiv.data import Spec, from_file
from sensiv.estimation import iv

REL = 1e-8


def simulated(n: int = 900, seed: int = 11) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    county = rng.integers(0, 25, n)
    year = rng.integers(0, 12, n)
    effect = rng.normal(size=25)[county]
    z = rng.normal(size=n) + 0.4 * effect
    u = rng.normal(size=n)
    x = z + 0.5 * u + effect + rng.normal(size=n)
    y = 0.5 * x + effect + u
    return pd.DataFrame({"y": y, "x": x, "z": z, "county": county, "year": year,
                         "state": county // 5})


def quiet_fit(data, spec, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        warnings.simplefilter("ignore", FewClustersWarning)
        return iv.fit(data, spec, **kwargs)


def test_absorbed_two_way_equals_cgm_from_reference_fits_with_indicators():
    # CGM 2011: V = V_A + V_B − V_{A∩B}, each term a one-way clustered fit of the reference
    # library (linearmodels 7.1 IV2SLS, cov_type="clustered", debiased=False) with the county
    # fixed effects as indicator columns.  (With the indicators inside sensiv itself the
    # eigenvalue fix would act on the indicators' directions too, so the reference is built
    # from the one-way fits, which need no fix.)
    from linearmodels.iv import IV2SLS

    frame = simulated()
    rng = np.random.default_rng(0)
    frame["g"], frame["h"] = rng.integers(0, 80, len(frame)), rng.integers(0, 70, len(frame))
    dummies = pd.get_dummies(frame["county"].astype(str), prefix="c", drop_first=True)
    exog = dummies.astype(float).assign(const=1.0)
    pair = frame["g"].astype(str) + "|" + frame["h"].astype(str)
    fits = [IV2SLS(frame["y"], exog, frame[["x"]], frame[["z"]]).fit(
        cov_type="clustered", clusters=labels, debiased=False)
        for labels in (frame["g"], frame["h"], pair)]
    variance = sum(sign * float(f.cov.loc["x", "x"]) for sign, f in zip((1, 1, -1), fits))
    absorbed = quiet_fit(frame, Spec("y", ["x"], ["z"], absorb=["county"], cluster=["g", "h"]))
    assert not absorbed.psd_fix
    assert absorbed.tsls.value("x") == pytest.approx(float(fits[0].params["x"]), rel=REL)
    assert absorbed.tsls.std_error("x") == pytest.approx(np.sqrt(variance), rel=REL)
    assert absorbed.to_dict()["clusters"] == ["g", "h"]


def test_nested_in_either_cluster_variable_counts_nothing(tmp_path):
    frame = simulated()
    spec = Spec("y", ["x"], ["z"], absorb=["county"], cluster=["state", "year"])
    memory = quiet_fit(frame, spec, small=True)
    assert memory.absorbed_parameters == 0  # county is nested in state
    path = tmp_path / "d.csv"
    frame.to_csv(path, index=False)
    streamed = quiet_fit(from_file(path, spec, chunk_rows=83), None, small=True)
    assert streamed.absorbed_parameters == 0
    assert streamed.tsls.std_error("x") == pytest.approx(memory.tsls.std_error("x"), rel=1e-10)
    # Not nested in either: every level but the constant's counts.
    other = quiet_fit(frame, Spec("y", ["x"], ["z"], absorb=["year"],
                                  cluster=["state", "county"]), small=True)
    assert other.absorbed_parameters == 11
