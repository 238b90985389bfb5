"""The command line of two-way clustering and the wild cluster bootstrap: README examples,
JSON keys, recipes, and exit code 2 on bad input.

Numbers are checked in tests/estimation/test_two_way.py (CGM formula from the reference
library) and tests/estimation/test_wild_bootstrap.py; here the contract of the commands.
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
EXAMPLE = Path(__file__).resolve().parents[2] / "examples" / "irrigation.csv"
ROLES = ("--outcome", "maize_yield", "--treatment", "irrigation_hours", "--instrument",
         "height_m", "--control", "plot_ha")


def invoke(*args):
    return runner.invoke(app, [str(a) for a in args])


def test_readme_two_way_example():
    result = invoke("fit", EXAMPLE, *ROLES, "--cluster", "village", "--cluster", "soil")
    assert result.exit_code == 0, result.stderr
    assert "two-way" in result.stdout
    assert "'soil' has only 3 groups" in result.stdout


def test_two_way_json_keys_in_fit_and_sweep():
    result = invoke("fit", EXAMPLE, *ROLES, "--cluster", "village", "--cluster", "soil",
                    "--json")
    assert result.exit_code == 0, result.stderr
    doc = json.loads(result.stdout)
    assert doc["clusters"] == ["village", "soil"]
    assert doc["cluster_counts"] == {"village": 60, "soil": 3}
    assert doc["n_clusters"] == 3 and isinstance(doc["psd_fix"], bool)
    sweep = invoke("sweep", EXAMPLE, *ROLES, "--cluster", "village", "--cluster", "soil",
                   "--direct=-0.001:0.001", "--json")
    assert sweep.exit_code == 0, sweep.stderr
    swept = json.loads(sweep.stdout)
    assert swept["union_ci"] and swept["se_type"] == "cluster"
    assert any("'soil' has only 3 groups" in note for note in swept["notes"])


def test_one_cluster_json_unchanged():
    doc = json.loads(invoke("fit", EXAMPLE, *ROLES, "--cluster", "village", "--json").stdout)
    assert doc["n_clusters"] == 60
    assert not {"clusters", "psd_fix", "bootstrap"} & set(doc)


def test_corrbound_refuses_two_way():
    result = invoke("corrbound", EXAMPLE, *ROLES, "--cluster", "village", "--cluster", "soil",
                    "--max-ratio", "0.1", "--reps", "9", "--seed", "1")
    assert result.exit_code == 2
    assert "one --cluster" in result.stderr and "Traceback" not in result.stderr


def test_three_clusters_exit_2():
    result = invoke("fit", EXAMPLE, *ROLES, "--cluster", "village", "--cluster", "soil",
                    "--cluster", "plot_ha")
    assert result.exit_code == 2
    assert "at most two" in result.stderr


def test_readme_bootstrap_example():
    result = invoke("fit", EXAMPLE, *ROLES, "--cluster", "village", "--bootstrap", "wild",
                    "--reps", "999", "--seed", "1")
    assert result.exit_code == 0, result.stderr
    assert "Bootstrap: wild restricted efficient" in result.stdout
    assert "bootstrap p" in result.stdout
    assert "interval by test inversion" in result.stdout


def test_bootstrap_json_and_no_progress_under_json():
    result = invoke("fit", EXAMPLE, *ROLES, "--cluster", "village", "--bootstrap", "wild",
                    "--reps", "199", "--seed", "3", "--threshold", "0.012", "--json")
    assert result.exit_code == 0, result.stderr
    assert result.stderr == ""
    boot = json.loads(result.stdout)["bootstrap"]
    assert set(boot) >= {"method", "reps", "seed", "weights", "p_value", "ci", "n_clusters"}
    assert boot["reps"] == 199 and boot["seed"] == 3 and boot["weights"] == "rademacher"
    assert boot["threshold"] == 0.012 and 0.0 <= boot["p_value"] <= 1.0
    low, high = boot["ci"]
    assert low < 0.012 < high  # the estimate is 0.012 (invented demo data)


@pytest.mark.parametrize("extra, words", [
    ((), "add --cluster"),
    (("--cluster", "village", "--reps", "0"), "--reps"),
    (("--cluster", "village", "--seed", "-4"), "seed"),
    (("--cluster", "village", "--cluster", "soil"), "one cluster variable"),
])
def test_bootstrap_bad_input_exit_2(extra, words):
    result = invoke("fit", EXAMPLE, *ROLES, "--bootstrap", "wild", *extra)
    assert result.exit_code == 2
    assert words in result.stderr and "Traceback" not in result.stderr


def test_bootstrap_unknown_method_exit_2():
    result = invoke("fit", EXAMPLE, *ROLES, "--cluster", "village", "--bootstrap", "pairs")
    assert result.exit_code == 2
    assert "not a bootstrap method" in result.stderr


def test_recipe_two_way_cluster(tmp_path):
    rng = np.random.default_rng(2)
    n = 900
    a, b = rng.integers(0, 40, n), rng.integers(0, 35, n)
    z = rng.normal(size=n)
    x = z + rng.normal(size=n)
    frame = pd.DataFrame({"y": x + rng.normal(size=n), "x": x, "z": z, "a": a, "b": b})
    frame.to_csv(tmp_path / "d.csv", index=False)
    (tmp_path / "r.toml").write_text(
        'title = "two-way"\n[data]\npath = "d.csv"\noutcome = "y"\ntreatments = ["x"]\n'
        'instruments = ["z"]\ncluster = ["a", "b"]\n[[analysis]]\nkind = "fit"\n')
    result = invoke("run", tmp_path / "r.toml", "--out", tmp_path / "out", "--json")
    assert result.exit_code == 0, result.stderr
    fitted = json.loads(result.stdout)["analyses"][0]["result"]
    assert fitted["clusters"] == ["a", "b"]
    assert fitted["cluster_counts"] == {"a": 40, "b": 35}
    bad = tmp_path / "bad.toml"
    bad.write_text((tmp_path / "r.toml").read_text().replace('["a", "b"]', '["a", 3]'))
    result = invoke("run", bad, "--out", tmp_path / "out2")
    assert result.exit_code == 2
    assert "cluster" in result.stderr
