"""The breakdown set against the leave-one-out yardsticks (``sweep --calibrate``).

Sources: common practice, no source — the breakdown direct effect b is where the union of
intervals over |direct effect| ≤ b first reaches the threshold, so a sweep run again with the
range ±b must have an end of its union interval at the threshold; the yardstick is the shift
in the reduced form when a control is left out, recomputed here with numpy least squares.
"""

from __future__ import annotations

import json
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from sensiv.cli.app import app
from sensiv.data import Spec
from sensiv.present.text_against import against_sentence, ratio_words
from sensiv.sensitivity import bounds, calibrate
from sensiv.sensitivity.against_yardsticks import compare

EXAMPLE = Path(__file__).resolve().parents[2] / "examples" / "irrigation.csv"
SPEC = Spec("maize_yield", ["irrigation_hours"], ["height_m"], controls=["plot_ha", "soil"],
            cluster="village")


@pytest.fixture(scope="module")
def pair():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sweep = bounds.sweep(EXAMPLE, SPEC, direct=["-0.005:0.005"], points=11)
        return sweep, calibrate.calibrate(EXAMPLE, SPEC)


def _reduced_form(frame, controls):
    """OLS coefficient of height_m in maize_yield on height_m, controls and a constant."""
    parts = [frame[["height_m"]].to_numpy(float), np.ones((len(frame), 1))]
    for c in controls:
        if not pd.api.types.is_numeric_dtype(frame[c]):
            parts.append(pd.get_dummies(frame[c], drop_first=True).to_numpy(float))
        else:
            parts.append(frame[[c]].to_numpy(float))
    coef, *_ = np.linalg.lstsq(np.hstack(parts), frame["maize_yield"].to_numpy(float),
                               rcond=None)
    return coef[0]


def test_ratio_is_yardstick_over_breakdown(pair):
    sweep, cal = pair
    cmp = compare(sweep, cal)
    b = cmp.breakdown[0]
    assert b > 0
    frame = pd.read_csv(EXAMPLE)
    full = _reduced_form(frame, ["plot_ha", "soil"])
    for item in cmp.items:
        kept = [c for c in ("plot_ha", "soil") if c != item.yardstick]
        shift = _reduced_form(frame, kept) - full
        assert item.implied == pytest.approx(abs(shift), rel=1e-6)
        assert item.ratio == pytest.approx(abs(shift) / b, rel=1e-9)
        assert item.implied_rf == pytest.approx(abs(shift / full), rel=1e-6)
    # largest first
    assert [i.implied for i in cmp.items] == sorted((i.implied for i in cmp.items), reverse=True)


def test_breakdown_direct_effect_is_where_the_union_reaches_zero(pair):
    sweep, cal = pair
    b = compare(sweep, cal).breakdown[0]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        again = bounds.sweep(EXAMPLE, SPEC, direct=[f"{-b}:{b}"], points=11)
    assert again.union_ci.low == pytest.approx(0.0, abs=1e-6 * sweep.estimate)


def test_sentence_states_breakdown_and_largest_yardstick(pair):
    cmp = compare(*pair)
    text = against_sentence(cmp)
    top = cmp.largest[0]
    assert text.startswith("The conclusion (irrigation_hours effect > 0) survives")
    assert f"leaving out {top.yardstick}" in text and "% of its reduced form" in text
    assert text.count(".") >= 1 and text.endswith(".")
    assert ratio_words(4.0) == "4 times as large" and ratio_words(0.25) == "25% of that"


def test_sweep_calibrate_cli_json_and_text(tmp_path):
    args = ["sweep", str(EXAMPLE), "--outcome", "maize_yield", "--treatment",
            "irrigation_hours", "--instrument", "height_m", "--control", "plot_ha",
            "--control", "soil", "--cluster", "village", "--direct=-0.005:0.005",
            "--points", "11", "--calibrate"]
    runner = CliRunner()
    res = runner.invoke(app, args + ["--json", "--out", str(tmp_path / "o")])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.stdout)
    assert {"calibration", "against_yardsticks"} <= set(doc)
    assert doc["against_yardsticks"]["yardsticks"][0]["ratio"] > 0
    assert doc["calibration"]["yardsticks"]
    assert (tmp_path / "o" / "against_yardsticks.md").is_file()
    text = runner.invoke(app, args)
    assert text.exit_code == 0 and "Against the leave-one-out yardsticks" in text.stdout
    assert "Caution" in text.stdout
