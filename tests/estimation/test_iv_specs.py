"""2SLS with the specification options of the data layer: a row filter, categorical
(integer-coded) controls, and the few-clusters warning.

* reference library: linearmodels ``IV2SLS`` (``debiased`` as ``small``) fitted on the frame
  filtered by pandas, and on explicit 0/1 dummy columns built by pandas; agreement at 1e-8
  (the issue's contract for reference-library checks);
* the 30-cluster threshold of the warning is a rule of thumb (common practice, no source).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from sensiv.core.errors import FewClustersWarning, WeakInstrumentWarning
from sensiv.data import Spec, from_file, from_frame
from sensiv.estimation import iv

linearmodels = pytest.importorskip("linearmodels")
from linearmodels.iv import IV2SLS  # noqa: E402

REL = 1e-8
COV_NAMES = {"classic": "unadjusted", "robust": "robust", "cluster": "clustered"}


def simulated(n: int = 900, seed: int = 11) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    z1, z2, w1 = rng.normal(size=(3, n))
    code = rng.integers(1, 7, n)  # an integer-coded category with 6 levels
    group = rng.integers(0, 45, n)
    ability = rng.normal(size=n)
    x1 = 0.6 * z1 + 0.3 * z2 + 0.4 * w1 + 0.2 * code + ability + rng.normal(size=n)
    y = (1.0 + 2.0 * x1 + 0.5 * w1 + np.sin(code) + ability
         + rng.normal(size=n) * (1 + np.abs(z1)))
    frame = pd.DataFrame({"y": y, "x1": x1, "z1": z1, "z2": z2, "w1": w1, "code": code,
                          "g": group, "age": rng.integers(16, 80, n).astype(float),
                          "sector": rng.choice(["farm", "trade", "public"], n),
                          "wt": rng.uniform(0.5, 2.0, n)})
    frame.loc[rng.choice(n, 30, replace=False), "age"] = np.nan
    return frame


def reference(frame, controls, se, small, weight=None):
    exog = frame[list(controls)].assign(const=1.0)
    model = IV2SLS(frame["y"], exog, frame[["x1"]], frame[["z1", "z2"]],
                   weights=None if weight is None else frame[weight])
    kwargs = {"cov_type": COV_NAMES[se], "debiased": small}
    if se == "cluster":
        kwargs["clusters"] = frame["g"]
    return model.fit(**kwargs)


def quiet_fit(source, se, small):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        return iv.fit(source, se=se, small=small)


def assert_same(result, ref, names):
    for name in names:
        np.testing.assert_allclose(result.tsls.value(name), ref.params[name], rtol=REL, atol=0)
        np.testing.assert_allclose(result.tsls.std_error(name), ref.std_errors[name],
                                   rtol=REL, atol=0)


WHERE = "(age >= 25 and age < 70 or age is missing) and sector in ['farm', 'trade']"


def pandas_filtered(frame: pd.DataFrame) -> pd.DataFrame:
    """The rows WHERE keeps, selected by pandas alone."""
    age = frame["age"]
    keep = (((age >= 25) & (age < 70)) | age.isna()) & frame["sector"].isin(["farm", "trade"])
    return frame[keep]


@pytest.mark.parametrize("se", ["classic", "robust", "cluster"])
@pytest.mark.parametrize("small", [False, True])
@pytest.mark.parametrize("weight", [None, "wt"])
def test_where_equals_fit_on_prefiltered_frame(se, small, weight):
    # reference library: linearmodels IV2SLS on the frame filtered by pandas, 1e-8
    frame = simulated()
    spec = Spec("y", ["x1"], ["z1", "z2"], controls=["w1"], cluster="g", weight=weight,
                where=WHERE)
    result = quiet_fit(from_frame(frame, spec), se, small)
    kept = pandas_filtered(frame)
    ref = reference(kept, ["w1"], se, small, weight)
    assert result.n == len(kept) and result.n_filtered == len(frame) - len(kept)
    assert_same(result, ref, ["x1", "w1"])


def test_where_streamed_equals_in_memory(tmp_path):
    frame = simulated()
    path = tmp_path / "d.csv"
    frame.to_csv(path, index=False)
    spec = Spec("y", ["x1"], ["z1", "z2"], controls=["w1"], categorical=["code"],
                cluster="g", where=WHERE)
    memory = quiet_fit(from_frame(frame, spec), "cluster", False)
    streamed = quiet_fit(from_file(path, spec, chunk_rows=97), "cluster", False)
    np.testing.assert_allclose(streamed.tsls.estimate, memory.tsls.estimate, rtol=1e-10)
    np.testing.assert_allclose(streamed.tsls.covariance, memory.tsls.covariance, rtol=1e-9)
    assert (streamed.n, streamed.n_filtered) == (memory.n, memory.n_filtered)


def test_where_in_json_and_assumptions():
    frame = simulated()
    result = quiet_fit(from_frame(frame, Spec("y", ["x1"], ["z1"], where="age > 30")),
                       "robust", False)
    document = result.to_dict()
    assert document["n_filtered"] == int((~(frame["age"] > 30)).sum())
    assert document["where"] == "age > 30"
    assert any("row filter 'age > 30'" in line for line in document["assumptions"])
    plain = quiet_fit(from_frame(frame, Spec("y", ["x1"], ["z1"])), "robust", False)
    assert plain.to_dict()["n_filtered"] == 0 and plain.to_dict()["where"] is None


@pytest.mark.parametrize("se", ["classic", "robust", "cluster"])
@pytest.mark.parametrize("weight", [None, "wt"])
def test_categorical_equals_explicit_dummies(se, weight):
    # reference library: linearmodels IV2SLS with 0/1 dummy columns made by pandas.get_dummies
    frame = simulated()
    spec = Spec("y", ["x1"], ["z1", "z2"], controls=["w1"], categorical=["code"],
                cluster="g", weight=weight)
    result = quiet_fit(from_frame(frame, spec), se, True)
    dummies = pd.get_dummies(frame["code"], prefix="code", prefix_sep="", dtype=float)
    dummies = dummies.drop(columns=dummies.columns[0])
    dummies.columns = [f"code[{c[4:]}]" for c in dummies.columns]
    wide = pd.concat([frame, dummies], axis=1)
    ref = reference(wide, ["w1", *dummies.columns], se, True, weight)
    assert result.controls == ("w1", *dummies.columns)
    assert_same(result, ref, ["x1", "w1", *dummies.columns])


def test_few_clusters_warning_and_note():
    # common practice, no source: fewer than 30 clusters
    frame = simulated().assign(g=lambda f: f["g"] % 12)
    spec = Spec("y", ["x1"], ["z1", "z2"], cluster="g")
    with pytest.warns(FewClustersWarning, match="only 12 groups.*under-cover"):
        result = iv.fit(from_frame(frame, spec), se="cluster")
    assert any("few clusters" in note for note in result.to_dict()["notes"])
    assert "few clusters" in str(result)
    with warnings.catch_warnings():
        warnings.simplefilter("error", FewClustersWarning)
        iv.fit(from_frame(frame, spec), se="robust")  # no clusters used, no warning
        many = simulated().assign(g=lambda f: f["g"] % 30)
        assert iv.fit(from_frame(many, spec), se="cluster").n_clusters == 30
