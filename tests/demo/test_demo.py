"""Tests of the invented demo generators (``sensiv.demo``).

The demo data are invented; these tests check that they are reproducible and that they behave
as documented.  Every tolerance below is "common practice, no source": a check of a designed
property of a simulation, with slack of a few standard errors.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from sensiv import demo

EXAMPLES = Path(__file__).resolve().parents[2] / "examples"


def _wald(y: np.ndarray, x: np.ndarray, z: np.ndarray) -> float:
    """Simple IV (Wald) ratio cov(y, z) / cov(x, z), no controls."""
    return float(np.cov(y, z)[0, 1] / np.cov(x, z)[0, 1])


def _ols_slope(y: np.ndarray, x: np.ndarray) -> float:
    return float(np.cov(y, x)[0, 1] / np.var(x, ddof=1))


def _first_stage_f(x: np.ndarray, z: np.ndarray) -> float:
    """Homoskedastic F (= t squared) of the slope of x on a constant and a single z."""
    zc, xc = z - z.mean(), x - x.mean()
    slope = (zc @ xc) / (zc @ zc)
    resid = xc - slope * zc
    sigma2 = (resid @ resid) / (len(x) - 2)
    return float(slope**2 * (zc @ zc) / sigma2)


# --- reproducibility ------------------------------------------------------------------------


@pytest.mark.parametrize("generator", [demo.irrigation, demo.nudge])
def test_same_seed_gives_identical_frame(generator):
    first, second = generator(), generator()
    pd.testing.assert_frame_equal(first.frame, second.frame)
    assert first.truth == second.truth


@pytest.mark.parametrize("generator", [demo.irrigation, demo.nudge])
def test_other_seed_gives_other_frame(generator):
    assert not generator(seed=1).frame.equals(generator(seed=2).frame)


def test_shipped_examples_match_generator_byte_for_byte(tmp_path):
    written = demo.write_examples(tmp_path)
    assert [p.name for p in written] == ["irrigation.csv", "nudge.csv", "published_table.json",
                                         "demo.toml", "per_instrument.csv"]
    for path in written:
        shipped = EXAMPLES / path.name
        assert shipped.exists(), f"{shipped} missing: run `python -m sensiv.demo examples`"
        assert shipped.read_bytes() == path.read_bytes(), (
            f"{shipped} differs from the generator: run `python -m sensiv.demo examples`"
        )


def test_csv_reads_back_to_generated_frame(tmp_path):
    demo.write_examples(tmp_path)
    for data in (demo.irrigation(), demo.nudge()):
        read = pd.read_csv(tmp_path / f"{data.name}.csv")
        assert list(read.columns) == list(data.frame.columns)
        for column in data.frame.columns:
            if pd.api.types.is_numeric_dtype(data.frame[column]):
                np.testing.assert_array_equal(read[column].to_numpy(), data.frame[column])
            else:
                assert read[column].astype(str).tolist() == data.frame[column].tolist()


def test_module_entry_point_writes_files(tmp_path, capsys):
    assert demo.main([str(tmp_path / "out")]) == 0
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == [
        "demo.toml",
        "irrigation.csv",
        "nudge.csv",
        "per_instrument.csv",
        "published_table.json",
    ]


# --- shape of the results -------------------------------------------------------------------


@pytest.mark.parametrize("generator", [demo.irrigation, demo.nudge])
def test_roles_name_existing_columns_and_description_says_invented(generator):
    data = generator()
    roles = data.roles
    named = [roles["outcome"], *roles["treatments"], *roles["instruments"], *roles["controls"]]
    if roles["cluster"] is not None:
        named.append(roles["cluster"])
    assert set(named) <= set(data.frame.columns)
    assert "INVENTED" in data.description
    assert {"beta", "direct_effect"} <= set(data.truth)
    assert f"{data.truth['beta']:g}" in data.description
    assert f"{data.truth['direct_effect']:g}" in data.description
    assert not data.frame.isna().any().any()


def test_demo_data_is_frozen():
    data = demo.nudge(n=40)
    with pytest.raises(AttributeError):
        data.name = "other"


@pytest.mark.parametrize("bad", [0, 3, 2.5, True])
def test_bad_size_is_rejected(bad):
    with pytest.raises(ValueError, match="n must be an integer"):
        demo.nudge(n=bad)


# --- designed properties: irrigation --------------------------------------------------------


@pytest.fixture(scope="module")
def irrigation_data():
    return demo.irrigation()


def test_irrigation_columns_and_magnitudes(irrigation_data):
    frame = irrigation_data.frame
    assert set(frame["soil"]) == {"clay", "loam", "sand"}
    assert frame["village"].nunique() == demo.IRRIGATION_N_VILLAGES
    assert 3.0 < frame["maize_yield"].mean() < 7.0  # t/ha, common practice, no source
    assert 100.0 < frame["irrigation_hours"].mean() < 300.0
    assert (frame["plot_ha"] > 0).all() and (frame["height_m"] > 0).all()


def test_irrigation_first_stage_negative_and_strong(irrigation_data):
    frame = irrigation_data.frame
    x, z = frame["irrigation_hours"].to_numpy(), frame["height_m"].to_numpy()
    slope = np.cov(x, z)[0, 1] / np.var(z, ddof=1)
    assert slope < 0  # lower plots irrigate more
    assert abs(slope - irrigation_data.truth["first_stage"]) < 0.5
    assert _first_stage_f(x, z) > 10.0  # rule of thumb, common practice, no source


def test_irrigation_iv_near_naive_limit_and_ols_biased(irrigation_data):
    frame, truth = irrigation_data.frame, irrigation_data.truth
    y, x, z = (frame[c].to_numpy() for c in ("maize_yield", "irrigation_hours", "height_m"))
    target = truth["beta"] + truth["direct_effect"] / truth["first_stage"]
    assert target == pytest.approx(truth["naive_iv_limit"])
    wald, ols = _wald(y, x, z), _ols_slope(y, x)
    assert abs(wald - target) < abs(ols - target)
    assert abs(wald - target) < 0.0025  # about four standard errors of the simple Wald ratio
    assert ols < truth["beta"] - 0.003  # unobserved soil moisture biases OLS down, by design


def test_irrigation_direct_effect_biases_iv_up(irrigation_data):
    truth = irrigation_data.truth
    assert truth["naive_iv_limit"] > truth["beta"]  # lower plots also yield more directly
    # a small violation: a few percent of the reduced form beta * pi + gamma
    reduced_form = truth["beta"] * truth["first_stage"] + truth["direct_effect"]
    assert 0.01 < truth["direct_effect"] / reduced_form < 0.1


# --- designed properties: nudge -------------------------------------------------------------


@pytest.fixture(scope="module")
def nudge_data():
    return demo.nudge()


def test_nudge_binary_and_randomised(nudge_data):
    frame = nudge_data.frame
    for column in ("sms", "screened", "bp_controlled"):
        assert set(frame[column].unique()) == {0, 1}
    assert frame["sms"].sum() == len(frame) // 2  # exactly half messaged
    treated = frame.loc[frame["sms"] == 1, "age"]
    control = frame.loc[frame["sms"] == 0, "age"]
    se = np.sqrt(treated.var() / len(treated) + control.var() / len(control))
    assert abs(treated.mean() - control.mean()) < 3.0 * se  # balance, common practice, no source


def test_nudge_two_sided_noncompliance_and_wald(nudge_data):
    frame, truth = nudge_data.frame, nudge_data.truth
    by_arm = frame.groupby("sms")[["screened", "bp_controlled"]].mean()
    assert 0.0 < by_arm.loc[0, "screened"] < by_arm.loc[1, "screened"] < 1.0
    first_stage = by_arm.loc[1, "screened"] - by_arm.loc[0, "screened"]
    assert first_stage == pytest.approx(truth["first_stage"], abs=0.05)
    y, x, z = (frame[c].to_numpy(dtype=float) for c in ("bp_controlled", "screened", "sms"))
    wald = _wald(y, x, z)
    # the Wald ratio has standard error near 0.05 here; allow about three
    assert abs(wald - truth["naive_iv_limit"]) < 0.15
    assert truth["naive_iv_limit"] == pytest.approx(truth["beta"] + truth["direct_effect"] / 0.3)


# --- published table ------------------------------------------------------------------------


def test_published_table_consistent_and_labelled():
    table = demo.published_table()
    assert table["invented"] is True and "INVENTED" in table["description"]
    ratio = table["reduced_form"] / table["first_stage"]
    assert table["estimate"] == pytest.approx(ratio, abs=5e-4)  # printed to three decimals
    delta = np.hypot(table["reduced_form_se"], ratio * table["first_stage_se"])
    assert table["se"] == pytest.approx(delta / table["first_stage"], abs=5e-4)
    assert (table["first_stage"] / table["first_stage_se"]) ** 2 > 10.0
    assert isinstance(table["n"], int)
    shipped = json.loads((EXAMPLES / "published_table.json").read_text())
    assert shipped == table
