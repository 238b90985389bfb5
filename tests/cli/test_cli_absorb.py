"""``--absorb`` on the command line: the JSON keys in every data command, the text table
without absorbed coefficients, the one-line summary of a control with many levels, and exit 2
for the caller's mistakes.  The absorbed numbers themselves are checked against linearmodels
and pyfixest in tests/estimation/test_absorb.py; here the CLI is checked against the library
(one path, two spellings: common practice, no source).
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
from sensiv.estimation import iv

runner = CliRunner()
BASE = ("--outcome", "y", "--treatment", "x", "--instrument", "z", "--control", "w")


def invoke(*args):
    return runner.invoke(app, [str(a) for a in args])


@pytest.fixture(scope="module")
def frame() -> pd.DataFrame:
    rng = np.random.default_rng(9)
    n = 900
    firm = rng.integers(0, 120, n)
    year = rng.integers(2000, 2010, n)
    a = rng.normal(size=120)[firm] + 0.1 * (year - 2000)
    z = rng.normal(size=n) + 0.5 * a
    x = 0.8 * z + a + rng.normal(size=n)
    return pd.DataFrame({"y": 1.0 + 0.5 * x + a + rng.normal(size=n), "x": x, "z": z,
                         "w": rng.normal(size=n), "firm": [f"f{v}" for v in firm],
                         "year": year, "g": rng.integers(0, 40, n),
                         "grant": (firm % 2).astype(float), "sector": firm % 7,
                         "code": rng.integers(0, 80, n)})


@pytest.fixture(scope="module")
def data(frame, tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("absorb") / "d.csv"
    frame.to_csv(path, index=False)
    return path


@pytest.mark.parametrize("command,extra", [
    ("fit", ()),
    ("sweep", ("--direct=-0.1:0.1", "--points", "5")),
    ("prior", ("--prior", "normal:0:0.05")),
    ("corrbound", ("--reps", "20", "--seed", "1", "--points", "5")),
    ("calibrate", ()),
])
def test_absorb_keys_in_every_data_command(command, extra, data):
    result = invoke(command, data, *BASE, "--absorb", "firm", "--absorb", "year", *extra,
                    "--json")
    assert result.exit_code == 0, result.stderr
    document = json.loads(result.stdout)
    assert document["absorbed"] == {"firm": 120, "year": 10}
    assert document["n_singletons"] == 0
    assert document["absorb_iterations"] >= 1
    assert document["absorb_tolerance"] <= 1e-10
    assert any("'firm'" in line and "absorbed" in line for line in document["assumptions"])
    plain = json.loads(invoke(command, data, *BASE, *extra, "--json").stdout)
    assert "absorbed" not in plain


def test_fit_cli_equals_library(data, frame):
    result = invoke("fit", data, *BASE, "--absorb", "firm", "--cluster", "g", "--small",
                    "--json")
    assert result.exit_code == 0, result.stderr
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = iv.fit(frame, Spec("y", ["x"], ["z"], controls=["w"], absorb=["firm"],
                                 cluster="g"), small=True)
    document = json.loads(result.stdout)
    assert document["coef"]["x"] == pytest.approx(ref.tsls.value("x"), rel=1e-12)
    assert document["se"]["x"] == pytest.approx(ref.tsls.std_error("x"), rel=1e-12)
    assert "const" not in document["coef"]


def test_text_hides_absorbed_and_summarises_many_levels(data):
    result = invoke("fit", data, *BASE, "--absorb", "firm", "--categorical", "code")
    assert result.exit_code == 0, result.stderr
    text = result.stdout
    assert "absorbed fixed effects: firm (120 levels)" in text
    rows = [line.split()[0] for line in text.splitlines() if line.strip()]
    assert not any(r.startswith("firm[") or r == "const" for r in rows)
    assert "code: 79 indicator coefficients not listed" in text and "--absorb code" in text
    assert not any(r.startswith("code[") for r in rows)
    few = invoke("fit", data, *BASE, "--categorical", "sector").stdout
    assert "sector[1]" in few and "const" in few  # 7 levels: every one listed


@pytest.mark.parametrize("args,words", [
    (("--absorb", "frim"), ["absorbed fixed effect column 'frim' not found", "'firm'"]),
    (("--absorb", "w"), ["'w'", "both as control and as absorbed fixed effect"]),
])
def test_bad_absorb_exits_2(args, words, data):
    result = invoke("fit", data, *BASE, *args)
    assert result.exit_code == 2
    for word in words:
        assert word in result.stderr
    assert "Traceback" not in result.stderr


@pytest.mark.parametrize("command,extra", [("fit", ()), ("sweep", ("--direct=-0.1:0.1",))])
def test_absorbed_instrument_exits_2(command, extra, data):
    result = invoke(command, data, "--outcome", "y", "--treatment", "x", "--instrument",
                    "grant", "--absorb", "firm", *extra)
    assert result.exit_code == 2
    assert "instrument 'grant' does not vary within 'firm'" in result.stderr
    assert "absorbed by the fixed effect" in result.stderr


def test_absorbed_control_dropped_with_note(data):
    result = invoke("fit", data, *BASE, "--control", "sector", "--absorb", "firm", "--json")
    assert result.exit_code == 0, result.stderr
    document = json.loads(result.stdout)
    assert "sector" not in document["coef"]
    assert any("'sector'" in note and "dropped" in note for note in document["notes"])


def test_cluster_on_the_absorbed_column_is_allowed(data):
    result = invoke("fit", data, *BASE, "--absorb", "firm", "--cluster", "firm", "--small",
                    "--json")
    assert result.exit_code == 0, result.stderr
    assert json.loads(result.stdout)["n_clusters"] == 120


def test_readme_absorb_example():
    # the README's --absorb example runs as written (from the repository root)
    root = Path(__file__).resolve().parents[2]
    result = invoke("sweep", root / "examples" / "irrigation.csv", "--outcome", "maize_yield",
                    "--treatment", "irrigation_hours", "--instrument", "height_m", "--control",
                    "plot_ha", "--control", "soil", "--absorb", "village", "--cluster",
                    "village", "--small", "--direct=-0.005:0.005")
    assert result.exit_code == 0, result.stderr
    assert "fixed effects of 'village' (60 levels) absorbed" in result.stdout
