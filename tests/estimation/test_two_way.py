"""Two-way clustered covariances (Cameron, Gelbach & Miller 2011).

* the CGM formula ``V = V_A + V_B − V_{A∩B}`` computed by hand from three one-way cluster
  fits of the reference library (linearmodels ``IV2SLS``, ``cov_type="clustered"``,
  ``debiased`` as ``small``, so each term carries its own ``G/(G−1)·(n−1)/(n−k)``: the
  convention of CGM 2011, eq. 2.13 with each term's own factor); agreement at 1e-8;
* the eigenvalue fix (CGM 2011, section 2.3) and the few-clusters rule of thumb (30 groups;
  common practice, no source) are checked as designed properties.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from sensiv.core.errors import FewClustersWarning, InputError, WeakInstrumentWarning
from sensiv.data import Spec, from_frame
from sensiv.estimation import iv
from sensiv.estimation.covariance import clip_negative_eigenvalues

linearmodels = pytest.importorskip("linearmodels")
from linearmodels.iv import IV2SLS  # noqa: E402

REL = 1e-8


def simulated(n: int = 1200, seed: int = 5, g_a: int = 40, g_b: int = 35) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    a = rng.integers(0, g_a, n)
    b = rng.integers(0, g_b, n)
    shock_a, shock_b = rng.normal(size=g_a), rng.normal(size=g_b)
    z1, z2, w1 = rng.normal(size=(3, n))
    z1 = z1 + 0.5 * shock_a[a]
    v = rng.normal(size=n)
    x = 0.7 * z1 + 0.3 * z2 + 0.3 * w1 + v
    u = shock_a[a] + shock_b[b] + 0.5 * v + rng.normal(size=n)
    return pd.DataFrame({"y": 1.0 + 1.5 * x + 0.4 * w1 + u, "x": x, "z1": z1, "z2": z2,
                         "w1": w1, "a": a, "b": b, "wt": rng.uniform(0.5, 2.0, n)})


def one_way(frame: pd.DataFrame, clusters, small: bool, weight: str | None):
    model = IV2SLS(frame["y"], frame[["w1"]].assign(const=1.0), frame[["x"]],
                   frame[["z1", "z2"]], weights=None if weight is None else frame[weight])
    return model.fit(cov_type="clustered", clusters=clusters, debiased=small)


@pytest.mark.parametrize("small", [False, True])
@pytest.mark.parametrize("weight", [None, "wt"])
def test_two_way_equals_cgm_from_three_one_way_reference_fits(small, weight):
    frame = simulated()
    pair = frame["a"].astype(str) + "|" + frame["b"].astype(str)
    fits = [one_way(frame, frame[c], small, weight) for c in ("a", "b")]
    fits.append(one_way(frame, pair, small, weight))
    names = ["x", "w1", "const"]
    cov = sum(sign * f.cov.loc[names, names].to_numpy()
              for sign, f in zip((1, 1, -1), fits))
    spec = Spec("y", ["x"], ["z1", "z2"], controls=["w1"], cluster=["a", "b"], weight=weight)
    result = iv.fit(from_frame(frame, spec), se="cluster", small=small)
    ours = result.tsls.covariance
    assert not result.psd_fix
    assert np.allclose(ours, cov, rtol=REL, atol=0.0)
    assert result.tsls.value("x") == pytest.approx(float(fits[0].params["x"]), rel=REL)
    doc = result.to_dict()
    assert doc["clusters"] == ["a", "b"]
    assert doc["cluster_counts"] == {"a": 40, "b": 35}
    assert doc["n_clusters"] == 35
    assert doc["psd_fix"] is False
    assert any("two-way" in line for line in doc["assumptions"])


def test_one_way_json_unchanged():
    frame = simulated()
    result = iv.fit(from_frame(frame, Spec("y", ["x"], ["z1", "z2"], cluster="a")))
    doc = result.to_dict()
    assert "clusters" not in doc and "psd_fix" not in doc
    assert doc["n_clusters"] == 40


def test_eigenvalue_fix_clips_and_reports():
    # Designed property: a matrix with one negative eigenvalue is returned PSD, with the
    # positive part of its spectrum kept (common practice, no source).
    rng = np.random.default_rng(0)
    q, _ = np.linalg.qr(rng.normal(size=(3, 3)))
    matrix = (q * np.array([2.0, 1.0, -0.5])) @ q.T
    fixed, clipped = clip_negative_eigenvalues(matrix)
    assert clipped
    assert np.allclose(np.linalg.eigvalsh(fixed), [0.0, 1.0, 2.0], atol=1e-12)
    same, clipped = clip_negative_eigenvalues(fixed + 1e-3 * np.eye(3))
    assert not clipped and np.allclose(same, fixed + 1e-3 * np.eye(3))


def test_psd_fix_when_intersection_dominates():
    # Many singleton pairs with scores that cancel within A and within B make
    # V_A + V_B − V_{A∩B} indefinite; the fix then is reported in notes and JSON.
    rng = np.random.default_rng(3)
    rows = []
    for trial in range(400):
        frame = simulated(n=240, seed=trial, g_a=6, g_b=6)
        frame["a"] = rng.integers(0, 3, len(frame))
        frame["b"] = rng.integers(0, 3, len(frame))
        spec = Spec("y", ["x"], ["z1"], cluster=["a", "b"])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            result = iv.fit(from_frame(frame, spec), se="cluster")
        if result.psd_fix:
            rows.append(result)
            break
    assert rows, "no design with an indefinite two-way meat found"
    result = rows[0]
    assert result.to_dict()["psd_fix"] is True
    assert any("positive semi-definite" in note for note in result.notes)
    assert np.linalg.eigvalsh(result.tsls.covariance).min() >= -1e-12


def test_few_clusters_warns_for_each_variable():
    frame = simulated(g_a=12, g_b=20)
    spec = Spec("y", ["x"], ["z1", "z2"], controls=["w1"], cluster=["a", "b"])
    with pytest.warns(FewClustersWarning) as record:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", WeakInstrumentWarning)
            result = iv.fit(from_frame(frame, spec))
    texts = [str(w.message) for w in record if w.category is FewClustersWarning]
    assert any("'a' has only 12 groups" in t for t in texts)
    assert any("'b' has only 20 groups" in t for t in texts)
    assert len([n for n in result.notes if n.startswith("few clusters")]) == 2


def test_spec_cluster_forms():
    assert Spec("y", ["x"], ["z"], cluster=["a"]).cluster == "a"
    assert Spec("y", ["x"], ["z"], cluster=["a", "b"]).cluster == ("a", "b")
    with pytest.raises(InputError, match="at most two"):
        Spec("y", ["x"], ["z"], cluster=["a", "b", "c"])
    with pytest.raises(InputError, match="at most two"):
        Spec("y", ["x"], ["z"], cluster=["a", "a"])
    with pytest.raises(InputError, match="twice|both"):
        Spec("y", ["x"], ["z"], cluster=["a", "x"])
