"""``--label`` on every command: figures and text read the labels, JSON keeps the column names
and adds ``labels``, a label of an unused column exits 2.

Checks here are common practice, no source (labels are presentation only, so every number
must be the same with and without them).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from sensiv.cli.app import app

runner = CliRunner()
LABELS = ("--label", "y=Maize yield (t/ha)", "--label", "x=Irrigation (hours)",
          "--label", "z=Well depth")


def invoke(*args):
    return runner.invoke(app, [str(a) for a in args])


@pytest.fixture()
def data(tmp_path) -> Path:
    rng = np.random.default_rng(14)
    n = 300
    z = rng.normal(size=n)
    w = rng.normal(size=n)
    x = 0.8 * z + 0.3 * w + rng.normal(size=n)
    frame = pd.DataFrame({"y": 1.0 + 0.5 * x + 0.4 * w + rng.normal(size=n), "x": x, "z": z,
                          "w": w})
    path = tmp_path / "d.csv"
    frame.to_csv(path, index=False)
    return path


ROLES = ("--outcome", "y", "--treatment", "x", "--instrument", "z", "--control", "w")
COMMANDS = {
    "fit": (),
    "sweep": ("--direct=-0.05:0.05", "--points", "11"),
    "prior": ("--prior", "normal:0:0.02"),
    "calibrate": (),
    "corrbound": ("--max-ratio", "0.5", "--points", "5", "--reps", "20", "--seed", "1"),
}


def without(document: dict) -> dict:
    return {k: v for k, v in document.items() if k != "labels"}


def same(a, b) -> bool:
    """Equal JSON values, floats within 1e-12 relative (corrbound's solves can differ in the
    last bit from run to run, labels or not)."""
    if isinstance(a, dict) and isinstance(b, dict):
        return a.keys() == b.keys() and all(same(a[k], b[k]) for k in a)
    if isinstance(a, list) and isinstance(b, list):
        return len(a) == len(b) and all(same(x, y) for x, y in zip(a, b))
    if isinstance(a, float) and isinstance(b, float):
        return a == pytest.approx(b, rel=1e-12, abs=1e-15)
    return a == b


@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_labels_change_words_only(data, command):
    plain = invoke(command, data, *ROLES, *COMMANDS[command], "--json")
    named = invoke(command, data, *ROLES, *COMMANDS[command], *LABELS, "--json")
    assert plain.exit_code == 0 and named.exit_code == 0, named.stderr
    plain_doc, named_doc = json.loads(plain.stdout), json.loads(named.stdout)
    assert same(without(plain_doc), without(named_doc))      # the same numbers and keys
    assert plain_doc["labels"] == {}
    assert named_doc["labels"] == {"y": "Maize yield (t/ha)", "x": "Irrigation (hours)",
                                   "z": "Well depth"}
    text = invoke(command, data, *ROLES, *COMMANDS[command], *LABELS)
    assert "Irrigation (hours)" in text.stdout or "Well depth" in text.stdout


def test_sweep_text_and_files_read_the_labels(data, tmp_path):
    out = tmp_path / "out"
    result = invoke("sweep", data, *ROLES, "--direct=-0.05:0.05", "--points", "11", *LABELS,
                    "--out", out)
    assert result.exit_code == 0, result.stderr
    assert "effect of Irrigation (hours) on Maize yield (t/ha)" in result.stdout
    assert " t/ha (" in result.stdout                # the breakdown in the outcome's unit
    assert "Well depth:" in result.stdout
    assert json.loads((out / "sweep.json").read_text())["labels"]["x"] == "Irrigation (hours)"
    assert "Irrigation (hours)" in (out / "sweep.md").read_text()


def test_the_curve_axes_read_the_labels(data):
    import sensiv

    frame = pd.read_csv(data)
    res = sensiv.sweep(frame, outcome="y", treatment="x", instruments="z", controls="w",
                       direct="-0.05:0.05", points=11,
                       labels={"y": "Maize yield (t/ha)", "x": "Irrigation (hours)"})
    ax = res.plot("curve").axes[0]
    assert ax.get_ylabel() == "β, effect of Irrigation (t/ha per hour)"
    assert ax.get_xlabel().endswith("of z (t/ha)")   # a direct effect is in outcome units
    assert sensiv.sweep(frame, outcome="y", treatment="x", instruments="z", controls="w",
                        direct="-0.05:0.05", points=11).plot("curve").axes[0].get_ylabel() \
        == "β, effect of x"


def test_discrete_and_published_take_labels(tmp_path):
    rng = np.random.default_rng(3)
    n = 400
    z = rng.integers(0, 2, n)
    x = (rng.uniform(size=n) < 0.3 + 0.4 * z).astype(int)
    y = (rng.uniform(size=n) < 0.3 + 0.3 * x).astype(int)
    path = tmp_path / "b.csv"
    pd.DataFrame({"y": y, "x": x, "z": z}).to_csv(path, index=False)
    result = invoke("discrete", path, "--outcome", "y", "--treatment", "x", "--instrument", "z",
                    "--points", "5", "--label", "x=Took the course", "--json")
    assert result.exit_code == 0, result.stderr
    assert json.loads(result.stdout)["labels"] == {"x": "Took the course"}
    published = invoke("published", "--estimate", "0.75", "--se", "0.25", "--first-stage",
                       "4.2", "--first-stage-se", "0.6", "--direct=-0.1:0.1",
                       "--label", "treatment=Schooling (years)",
                       "--label", "outcome=Log wage (log points)")
    assert published.exit_code == 0, published.stderr
    assert "Schooling" in published.stdout or "log points" in published.stdout
    wrong = invoke("published", "--estimate", "0.75", "--se", "0.25", "--first-stage", "4.2",
                   "--first-stage-se", "0.6", "--direct=-0.1:0.1", "--label", "educ=School")
    assert wrong.exit_code == 2 and "'educ'" in wrong.stderr


@pytest.mark.parametrize("bad, fragment", [
    ("wage=Wage", "'wage'"),
    ("x", "COLUMN=TEXT"),
    ("x=", "is empty"),
])
def test_bad_labels_exit_2_with_a_message(data, bad, fragment):
    result = invoke("sweep", data, *ROLES, "--direct=-0.05:0.05", "--label", bad)
    assert result.exit_code == 2
    assert fragment in result.stderr and "Traceback" not in result.stderr


def test_labels_end_with_the_command(data):
    invoke("fit", data, *ROLES, *LABELS)
    after = invoke("fit", data, *ROLES)
    assert "Irrigation" not in after.stdout
