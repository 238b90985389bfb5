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
    other = tf.tf_interval(1.0, 0.5, 30.0, 0.80)  # a level without a shipped table
    assert other.ci is None and other.critical_value is None
    assert "90%, 95% and 99%" in other.reason and other.to_dict()["ci"] is None


# Other levels: the tables computed by tf.tabulate (the same recurrence as the 95% table).
# Checks (common practice, no source beyond the characterisation in sensiv.estimation.tf):
# c(F) decreasing, → z_{1−α/2} at large F, the whole line at F ≤ z², and — the defining
# property — rejection rate α at ρ = 1 in the weak region by Monte Carlo (seed 12, 400,000
# draws; tolerance 3 Monte Carlo SEs).
LEVELS = [(0.90, 1.6448536269514722, (0.5, 1.5, 3.0)),    # z_{0.95}
          (0.99, 2.5758293035489004, (1.0, 3.0, 6.0))]    # z_{0.995}


@pytest.mark.parametrize("level,z,weak", LEVELS)
def test_other_levels_decrease_to_z(level, z, weak):
    table = tf.table_for(level)
    assert table is not None and table.z == pytest.approx(z, abs=1e-12)
    grid = np.linspace(table.lower_f + 0.01, 1.2 * table.upper_f, 800)
    values = np.array([tf.critical_value(f, level) for f in grid])
    assert np.all(np.diff(values) <= 1e-12)
    assert values[0] > 5 * z
    # c → z at large F: at 90% the recurrence reaches z (from F ≈ 33.7 on); at 99% it is still
    # a little above z where the table ends (F ≈ 8,950), and that last value is used beyond
    assert table.reaches_z == (level == 0.90)
    assert z <= table.last < 1.005 * z
    assert tf.critical_value(table.upper_f * 1.0001, level) == table.last
    assert tf.critical_value(1e6, level) == table.last
    assert math.isinf(tf.critical_value(z * z, level))
    near = tf.critical_value(0.98 * table.upper_f, level)
    assert table.last <= near < table.last + 0.01  # continuous at the end of the table
    whole = tf.tf_interval(1.0, 0.5, 0.9 * z * z, level)
    assert whole.ci == tf.Interval(-math.inf, math.inf) and "whole line" in whole.reason


@pytest.mark.parametrize("level,z,weak", LEVELS)
def test_other_levels_have_size_alpha_at_rho_one(level, z, weak):
    alpha = 1 - level
    table = tf.table_for(level)
    draws = 400_000
    e = np.random.default_rng(12).normal(size=draws)
    mc_se = math.sqrt(alpha * (1 - alpha) / draws)
    for f0 in weak:
        f = f0 + e
        t = e * f / f0  # ρ = 1: t_AR = f − f0 and t = f (f − f0) / f0
        crit = np.array([tf.critical_value(v * v, level) for v in np.abs(f[:20_000])])
        # the first 20,000 draws through the public function, the rest by the same rule
        rest = np.abs(f[20_000:])
        crit_rest = np.where(rest <= z, np.inf,
                             np.where(rest >= table.q[-1], z,
                                      np.maximum(np.interp(rest, table.q, table.c), z)))
        rate = float(np.mean(np.abs(t) > np.concatenate([crit, crit_rest])))
        assert abs(rate - alpha) <= 3 * mc_se, (f0, rate)


def test_fit_reports_tf_at_90_percent():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = iv.fit(from_frame(frame(), Spec("y", ["x"], ["z0"])), confidence_level=0.90)
    doc = result.to_dict()["tf"]
    f_stat = result.first_stages[0].f
    c = tf.critical_value(f_stat, 0.90)
    b, se = result.tsls.value("x"), result.tsls.std_error("x")
    assert doc["critical_value"] == pytest.approx(c) and c > 1.6448536269514722
    assert doc["ci"] == pytest.approx([b - c * se, b + c * se])
    assert "90% level" in doc["source"] and "tabulate" in doc["source"]
    assert "90% tF interval" in str(result)


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
@pytest.mark.parametrize("level", [0.95, 0.90, 0.99])
def test_shipped_table_matches_its_generator(level):
    table = tf.table_for(level)
    q, c = tf.tabulate(round(1 - level, 12))
    fresh = np.interp(table.q, q, c)
    assert np.allclose(fresh, table.c, rtol=1e-6)
