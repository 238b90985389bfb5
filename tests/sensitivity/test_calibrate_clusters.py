"""Few-clusters warnings in calibrate (the 30-group threshold: common practice, no source)."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from sensiv.core.errors import FewClustersWarning
from sensiv.data import Spec
from sensiv.sensitivity.calibrate import calibrate


def frame(groups: int) -> pd.DataFrame:
    rng = np.random.default_rng(7)
    n = 1200
    w = rng.normal(size=n)
    z = 0.5 * w + rng.normal(size=n)
    x = z + rng.normal(size=n)
    return pd.DataFrame({"y": x + w + rng.normal(size=n), "x": x, "z": z, "w": w,
                         "g": rng.integers(0, groups, n), "h": rng.integers(0, 50, n)})


def test_calibrate_warns_with_few_clusters():
    spec = Spec("y", ["x"], ["z"], controls=["w"], cluster="g")
    with pytest.warns(FewClustersWarning, match="only 12 groups"):
        result = calibrate(frame(12), spec)
    assert any(note.startswith("few clusters") for note in result.notes)


def test_calibrate_two_way_names_each_variable():
    spec = Spec("y", ["x"], ["z"], controls=["w"], cluster=["g", "h"])
    with pytest.warns(FewClustersWarning) as record:
        result = calibrate(frame(12), spec)
    texts = [str(w.message) for w in record if w.category is FewClustersWarning]
    assert any("'g' has only 12 groups" in t for t in texts)
    assert not any("'h'" in t for t in texts)
    assert len([n for n in result.notes if n.startswith("few clusters")]) == 1


def test_calibrate_many_clusters_is_quiet():
    spec = Spec("y", ["x"], ["z"], controls=["w"], cluster="g")
    with warnings.catch_warnings():
        warnings.simplefilter("error", FewClustersWarning)
        result = calibrate(frame(40), spec)
    assert not any(note.startswith("few clusters") for note in result.notes)
