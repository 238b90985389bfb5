"""``--absorb-tolerance`` on every data command, its checks (exit 2), and the statement of
corrbound's bootstrap with absorbed fixed effects.  The CLI is checked against the library
call with the same tolerance (one path, two spellings: common practice, no source); where the
number of steps shows the tolerance at work, the direct solve of a small fixed effect
(estimation/absorb_direct.py, one step whatever the tolerance) is switched off so that the
plain alternating projections run; the alternating projections themselves against linearmodels / pyfixest in
tests/estimation/test_absorb.py.
"""

from __future__ import annotations

import json
import warnings

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from sensiv.cli.app import app
from sensiv.data import Spec
from sensiv.estimation import iv

runner = CliRunner()
BASE = ("--outcome", "y", "--treatment", "x", "--instrument", "z", "--control", "w")
TWO = ("--absorb", "firm", "--absorb", "year")


def invoke(*args):
    return runner.invoke(app, [str(a) for a in args])


@pytest.fixture(scope="module")
def data(tmp_path_factory):
    rng = np.random.default_rng(21)
    n = 1200
    firm = rng.integers(0, 150, n)
    # years drawn unevenly by firm, so that the two fixed effects are far from orthogonal
    year = (firm // 15 + rng.integers(0, 4, n)) % 12
    a = rng.normal(size=150)[firm] + 0.2 * year
    z = rng.normal(size=n) + 0.5 * a
    x = 0.8 * z + a + rng.normal(size=n)
    frame = pd.DataFrame({"y": 1.0 + 0.5 * x + a + rng.normal(size=n), "x": x, "z": z,
                          "w": rng.normal(size=n) + 0.3 * year, "firm": firm, "year": year,
                          "g": rng.integers(0, 40, n)})
    path = tmp_path_factory.mktemp("tolerance") / "d.csv"
    frame.to_csv(path, index=False)
    return path


@pytest.fixture
def projections_only(monkeypatch):
    """Plain alternating projections (no direct solve of the small fixed effect), the path on
    which a looser tolerance means fewer steps."""
    from sensiv.estimation import absorb_direct

    monkeypatch.setattr(absorb_direct, "DIRECT_LEVELS", 0)


def test_a_looser_tolerance_stops_sooner_and_matches_the_library(data, projections_only):
    loose = json.loads(invoke("fit", data, *BASE, *TWO, "--absorb-tolerance", "1e-4",
                              "--json").stdout)
    tight = json.loads(invoke("fit", data, *BASE, *TWO, "--json").stdout)
    assert loose["absorb_tolerance"] <= 1e-4 and tight["absorb_tolerance"] <= 1e-10
    assert loose["absorb_iterations"] < tight["absorb_iterations"]
    spec = Spec("y", ("x",), ("z",), controls=("w",), absorb=("firm", "year"))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        direct = iv.fit(data, spec, absorb_tolerance=1e-4)
    assert loose["absorb_iterations"] == direct.absorption.iterations
    assert loose["coef"] == pytest.approx(direct.to_dict()["coef"], rel=1e-12)


def test_the_direct_solve_meets_both_tolerances_in_one_step(data, monkeypatch):
    # 'year' (12 levels) is solved directly beside 'firm': one step whatever the tolerance,
    # and the same coefficients as the plain projections to the tight tolerance.
    loose = json.loads(invoke("fit", data, *BASE, *TWO, "--absorb-tolerance", "1e-4",
                              "--json").stdout)
    tight = json.loads(invoke("fit", data, *BASE, *TWO, "--json").stdout)
    assert loose["absorb_iterations"] == tight["absorb_iterations"] == 1
    assert loose["absorb_tolerance"] <= 1e-4 and tight["absorb_tolerance"] <= 1e-10
    spec = Spec("y", ("x",), ("z",), controls=("w",), absorb=("firm", "year"))
    from sensiv.estimation import absorb_direct

    monkeypatch.setattr(absorb_direct, "DIRECT_LEVELS", 0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        plain = iv.fit(data, spec, absorb_tolerance=1e-12)
    assert plain.absorption.iterations > 1
    assert tight["coef"] == pytest.approx(plain.to_dict()["coef"], rel=1e-9)


@pytest.mark.parametrize("command,extra", [
    ("sweep", ("--direct=-0.1:0.1", "--points", "5")),
    ("prior", ("--prior", "normal:0:0.05")),
    ("corrbound", ("--reps", "20", "--seed", "1", "--points", "5")),
    ("calibrate", ()),
])
def test_every_data_command_takes_the_tolerance(command, extra, data, projections_only):
    loose = invoke(command, data, *BASE, *TWO, "--absorb-tolerance", "1e-3", *extra, "--json")
    tight = invoke(command, data, *BASE, *TWO, *extra, "--json")
    assert loose.exit_code == 0 and tight.exit_code == 0, loose.output
    a, b = json.loads(loose.stdout), json.loads(tight.stdout)
    assert a["absorb_iterations"] < b["absorb_iterations"]
    assert a["absorb_tolerance"] <= 1e-3


@pytest.mark.parametrize("value", ["0", "1", "-1e-8", "2"])
def test_a_tolerance_outside_0_1_is_exit_2(value, data):
    result = invoke("fit", data, *BASE, *TWO, "--absorb-tolerance", value)
    assert result.exit_code == 2
    assert "absorb tolerance" in result.output and "(0, 1)" in result.output
    assert "Traceback" not in result.output


def test_corrbound_states_that_the_bootstrap_holds_the_level_means_fixed(data):
    bounded = ("--max-ratio", "0.3", "--endogeneity", "positive")   # a bounded set
    result = invoke("corrbound", data, *BASE, "--absorb", "firm", "--reps", "30", "--seed",
                    "2", "--points", "5", *bounded, "--json")
    assert result.exit_code == 0, result.output
    stated = [a for a in json.loads(result.stdout)["assumptions"] if "level means" in a]
    assert stated and "not re-absorbed" in stated[0]
    assert json.loads(result.stdout)["bootstrap"] is not None
    plain = invoke("corrbound", data, *BASE, "--reps", "30", "--seed", "2", "--points", "5",
                   *bounded, "--json")
    assert not [a for a in json.loads(plain.stdout)["assumptions"] if "level means" in a]
