"""The breakdown read as a direct effect in outcome units, as a share of the reduced form and in
outcome SDs per instrument SD.

Sources beside each check:
* reference library: statsmodels ``OLS`` for the reduced-form coefficient of the instrument
  (controls included), pandas for the SDs (divisor n, as sensiv's weighted SDs with unit
  weights);
* common practice, no source: the identities outcome value = scale × half-width of a symmetric
  box, rf share = value / |reduced-form coefficient|, sd = value × SD(z) / SD(y).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
import statsmodels.api as sm

from sensiv.core.errors import WeakInstrumentWarning
from sensiv.core.results import Interval
from sensiv.data import from_frame
from sensiv.sensitivity import bounds
from sensiv.sensitivity.breakdown_units import curve_units, direct_units
from sensiv.sensitivity.published import published_analysis
from sensiv.sensitivity.union import union_interval
from sensiv.sensitivity.direct_sets import box_set

from tests.sensitivity.test_bounds import core_of, design, spec_for


def run(frame, k_z, ranges, threshold=0.0):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        return bounds.sweep(from_frame(frame, spec_for(k_z)), direct=ranges, se="robust",
                            threshold=threshold, points=11)


def reference_rf(frame, k_z):
    """Reduced-form coefficients of the instruments (reference library: statsmodels OLS)."""
    inst = [f"z{k + 1}" for k in range(k_z)]
    exog = sm.add_constant(frame[["w", *inst]])
    res = sm.OLS(frame["y"], exog).fit()
    return np.array([res.params[z] for z in inst])


@pytest.mark.parametrize("k_z", [1, 2])
def test_units_match_reduced_form_and_sds_from_the_reference(k_z):
    frame = design(k_z=k_z, seed=11)
    half = [0.02, 0.05][:k_z]
    res = run(frame, k_z, [f"-{h}:{h}" for h in half])
    b = res.breakdown
    assert b.scale is not None and b.scale > 0
    u = b.direct_units
    rf = reference_rf(frame, k_z)
    sd_y = frame["y"].std(ddof=0)
    for k in range(k_z):
        z = frame[f"z{k + 1}"]
        value = b.scale * half[k]                          # common practice, no source
        assert u.outcome[k] == pytest.approx(value, rel=1e-12)
        assert u.rf[k] == pytest.approx(value / abs(rf[k]), rel=1e-8)       # statsmodels
        assert u.sd[k] == pytest.approx(value * z.std(ddof=0) / sd_y, rel=1e-10)  # pandas
    doc = res.to_dict()["breakdown"]["direct_units"]
    assert doc["instruments"] == [f"z{k + 1}" for k in range(k_z)]
    assert doc["outcome"] == pytest.approx(list(u.outcome))
    assert len(doc["rf"]) == len(doc["sd"]) == k_z


def test_the_breakdown_direct_effect_is_where_the_union_touches_the_threshold():
    # common practice, no source: the union over the box ±value reaches the threshold there,
    # and stays clear of it just inside
    frame = design(seed=5)
    res = run(frame, 1, ["-0.01:0.01"], threshold=0.3)
    value = res.breakdown.direct_units.outcome[0]
    core = core_of(frame, 1, "robust")
    at = union_interval(core, box_set(["z1"], [(-value, value)]).vertices)
    inside = union_interval(core, box_set(["z1"], [(-0.99 * value, 0.99 * value)]).vertices)
    assert min(abs(at.low - 0.3), abs(at.high - 0.3)) < 1e-8
    assert not inside.contains(0.3)


def test_asymmetric_box_reads_the_largest_absolute_end():
    # common practice, no source
    u = direct_units(2.0, ["z"], [Interval(-0.01, 0.03)], [0.5], 2.0, [1.0])
    assert u.outcome == (pytest.approx(0.06),)
    assert u.rf == (pytest.approx(0.12),) and u.sd == (pytest.approx(0.03),)


def test_no_breakdown_gives_no_units_and_json_null():
    frame = design(seed=5)
    res = run(frame, 1, ["-0.01:0.01"], threshold=0.5)        # estimate near 0.5: no conclusion
    assert res.breakdown.scale == 0.0
    assert res.breakdown.direct_units is None
    assert res.to_dict()["breakdown"]["direct_units"] is None
    assert direct_units(None, ["z"], [Interval(-1, 1)], [1.0]) is None


def test_zero_reduced_form_leaves_the_share_unavailable():
    u = direct_units(1.0, ["z"], [Interval(-1, 1)], [0.0], 1.0, [1.0])
    assert u.rf == (None,) and u.to_dict()["rf"] == [None]


def test_curve_units_scale_linearly():
    rows = curve_units([0.0, 0.5, 1.0], [Interval(-0.02, 0.02)], [0.1], 2.0, [4.0])
    assert [r[0][0] for r in rows] == pytest.approx([0.0, 0.01, 0.02])
    assert [r[1][0] for r in rows] == pytest.approx([0.0, 0.1, 0.2])
    assert [r[2][0] for r in rows] == pytest.approx([0.0, 0.02, 0.04])


def test_published_units_use_the_printed_reduced_form_and_no_sd():
    # the invented demo table's numbers (examples/published_table.json)
    res = published_analysis(estimate=0.75, se=0.25, first_stage=4.2, first_stage_se=0.6,
                             reduced_form=3.15, reduced_form_se=0.95, direct="-0.1:0.1")
    b = res.breakdown
    u = b.direct_units
    assert u.outcome[0] == pytest.approx(b.scale * 0.1, rel=1e-12)
    assert u.rf[0] == pytest.approx(u.outcome[0] / 3.15, rel=1e-12)
    assert u.sd == (None,)
    assert res.to_dict()["breakdown"]["direct_units"]["sd"] == [None]
    assert math.isfinite(u.outcome[0])
