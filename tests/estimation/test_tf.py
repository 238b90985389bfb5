"""tF critical values (Lee, McCrary, Moreira & Porter 2022, AER, "Valid t-ratio inference
for IV").

* 1.96 for F ≥ 104.7 and 3.43 at F = 10: the paper's abstract (two decimals);
* decreasing in F, and the whole line at F ≤ 3.84: the paper's description of the function;
* size ≤ 5% for every correlation ρ and strength f₀ in the weak-instrument limit (the
  property that defines tF), by Monte Carlo on the limit experiment (t_AR, f) jointly normal;
  the tolerance is 3 Monte Carlo standard errors;
* the shipped table equals a fresh run of its generator (slow).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import pytest

from sensiv.data import Spec, from_frame
from sensiv.estimation import iv
from sensiv.estimation import tf


def test_abstract_values():
    # LMMP (2022) abstract: "a true 5 percent test instead requires an F greater than 104.7";
    # "maintaining 10 as a threshold requires replacing the critical value 1.96 with 3.43"
    for f_stat in (104.7, 150.0, 1e6):
        assert tf.critical_value(f_stat) == pytest.approx(1.96, abs=5e-3)
    assert round(tf.critical_value(10.0), 2) == 3.43
    assert tf.critical_value(104.0) > 1.96


def test_decreasing_and_unbounded_below_3_84():
    grid = np.linspace(3.85, 110.0, 800)
    values = np.array([tf.critical_value(f) for f in grid])
    assert np.all(np.diff(values) <= 1e-12)
    assert values[0] > 20.0
    assert math.isinf(tf.critical_value(3.84)) and math.isinf(tf.critical_value(1.0))
    whole = tf.tf_interval(1.0, 0.5, 3.0, 0.95)
    assert whole.critical_value is None and "whole line" in whole.reason
    assert whole.to_dict()["ci"] == [None, None]
    other = tf.tf_interval(1.0, 0.5, 30.0, 0.90)
    assert other.ci is None and "95%" in other.reason


def test_size_in_the_weak_instrument_limit():
    rng = np.random.default_rng(0)
    draws = 200_000
    e1, e2 = rng.normal(size=(2, draws))
    q = np.asarray(tf.Q_VALUES)
    c = np.asarray(tf.C_VALUES)
    worst = 0.0
    for rho in (0.0, 0.5, 0.9, 0.99, 1.0):
        for f0 in (0.5, 1.0, 1.5, 2.0, 2.5, 3.0, 4.0, 6.0, 9.0):
            f = f0 + e1
            t_ar = rho * e1 + math.sqrt(1 - rho * rho) * e2
            with np.errstate(divide="ignore", invalid="ignore"):
                t2 = t_ar ** 2 / (1 - 2 * rho * t_ar / f + t_ar ** 2 / f ** 2)
            crit = np.where(np.abs(f) <= tf.Z, np.inf,
                            np.where(np.abs(f) >= q[-1], tf.Z,
                                     np.maximum(np.interp(np.abs(f), q, c), tf.Z)))
            worst = max(worst, float(np.mean(t2 > crit ** 2)))
    mc_se = math.sqrt(0.05 * 0.95 / draws)
    assert worst <= 0.05 + 3 * mc_se
    assert worst >= 0.05 - 3 * mc_se  # the function is not needlessly conservative


def frame(instruments: int = 1) -> pd.DataFrame:
    rng = np.random.default_rng(4)
    n = 500
    z = rng.normal(size=(n, instruments))
    v = rng.normal(size=n)
    x = 0.3 * z.sum(axis=1) + v
    out = pd.DataFrame({"y": 0.5 * x + 0.6 * v + rng.normal(size=n), "x": x})
    for j in range(instruments):
        out[f"z{j}"] = z[:, j]
    return out


def test_fit_reports_tf_for_one_instrument():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = iv.fit(from_frame(frame(), Spec("y", ["x"], ["z0"])))
    doc = result.to_dict()["tf"]
    f_stat = result.first_stages[0].f
    assert 3.84 < f_stat < 104.7  # a design where tF differs from 1.96
    assert doc["f"] == pytest.approx(f_stat)
    c = tf.critical_value(f_stat)
    assert doc["critical_value"] == pytest.approx(c)
    b, se = result.tsls.value("x"), result.tsls.std_error("x")
    assert doc["ci"] == pytest.approx([b - c * se, b + c * se])
    assert "tF" in str(result)


def test_no_tf_with_two_instruments():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = iv.fit(from_frame(frame(2), Spec("y", ["x"], ["z0", "z1"])))
    assert "tf" not in result.to_dict()


@pytest.mark.slow
def test_shipped_table_matches_its_generator():
    q, c = tf.tabulate()
    fresh = np.interp(np.asarray(tf.Q_VALUES), q, c)
    assert np.allclose(fresh, tf.C_VALUES, rtol=1e-6)
