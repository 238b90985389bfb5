"""Few-clusters warning and the two-way refusal of the correlation bounds' cluster bootstrap
(the 30-group threshold: common practice, no source)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from sensiv.core.errors import FewClustersWarning, InputError
from sensiv.data import Spec
from sensiv.partial_id.correlation import correlation_bounds


def frame() -> pd.DataFrame:
    rng = np.random.default_rng(3)
    n = 800
    z, v = rng.normal(size=(2, n))
    x = z + v
    return pd.DataFrame({"y": 2.0 * x + v + rng.normal(size=n), "x": x, "z": z,
                         "g": rng.integers(0, 10, n), "h": rng.integers(0, 40, n)})


def test_cluster_bootstrap_warns_with_few_clusters():
    spec = Spec("y", ["x"], ["z"], cluster="g")
    with pytest.warns(FewClustersWarning, match="only 10 groups"):
        result = correlation_bounds(frame(), spec, max_ratio=0.2, reps=19, seed=1, points=3,
                                    endogeneity="positive")
    assert any("bootstrap of whole clusters" in note for note in result.notes)


def test_two_way_cluster_is_refused():
    spec = Spec("y", ["x"], ["z"], cluster=["g", "h"])
    with pytest.raises(InputError, match="one --cluster"):
        correlation_bounds(frame(), spec, max_ratio=0.2, reps=19, seed=1, points=3)
