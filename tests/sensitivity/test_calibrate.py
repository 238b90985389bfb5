"""Calibration of plausible direct effects: scale, leave-one-out yardsticks, zero first stage.

Sources beside each check:
* reference library: linearmodels (``IV2SLS`` without endogenous regressors is OLS; version
  in ``LM_VERSION``), refitted with and without each control, and on the subgroup's rows;
* van Kippersluis & Rietveld (2018): in a subgroup where the instrument does not move the
  treatment, the reduced-form coefficient estimates the direct effect;
* common practice, no source: invariances (row order, units, streaming) and simulation checks
  of a designed truth.
"""

from __future__ import annotations

import json
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

import linearmodels
from linearmodels.iv import IV2SLS

from sensiv.sensitivity import bounds
from sensiv.sensitivity.calibrate import calibrate, parse_group
from sensiv.sensitivity.direct_sets import parse_range
from sensiv.cli.app import app
from sensiv.data import Spec, from_file, from_frame
from sensiv.core.errors import InputError, WeakInstrumentWarning
from sensiv.sensitivity.prior_laws import parse_prior

LM_VERSION = linearmodels.__version__
REL = 1e-8  # agreement with the reference library (issue contract)
COV = {"classic": "unadjusted", "robust": "robust", "cluster": "clustered"}
ROOT = Path(__file__).resolve().parents[2]
EXAMPLE = ROOT / "examples" / "irrigation.csv"
runner = CliRunner()


def simulated(n=1500, seed=11, k_z=1, direct=0.1):
    """Controls that move both the instruments and the outcome, so yardsticks are sizable.

    Rows with ``nofs == 1`` (about 30 %) have no first stage; ``strongfs`` marks a random
    subgroup in which the first stage is as strong as elsewhere.
    """
    rng = np.random.default_rng(seed)
    region = rng.choice(["north", "south", "west"], n)
    shift = pd.Series(region).map({"north": 0.0, "south": 0.8, "west": -0.5}).to_numpy()
    w1 = rng.normal(size=n)
    w2 = rng.normal(size=n)
    z = rng.normal(size=(n, k_z)) + 0.6 * w1[:, None] + shift[:, None]
    nofs = (rng.uniform(size=n) < 0.3).astype(int)
    v = rng.normal(size=n)
    x = (1 - nofs) * (z @ np.linspace(0.8, 0.4, k_z)) + 0.5 * w1 + 0.4 * shift + v
    g = rng.integers(0, 30, n)
    y = (1.0 + 0.5 * x + z @ np.full(k_z, direct) + 0.7 * w1 - 0.3 * w2 + 1.2 * shift
         + 0.6 * v + rng.normal(size=n) * (1 + 0.3 * np.abs(w2)))
    frame = pd.DataFrame({"y": y, "x": x, "w1": w1, "w2": w2, "region": region, "g": g,
                          "wt": rng.uniform(0.5, 2.0, n), "nofs": nofs,
                          "strongfs": (rng.uniform(size=n) < 0.3).astype(int)})
    for k in range(k_z):
        frame[f"z{k + 1}"] = z[:, k]
    return frame


def spec_for(k_z=1, controls=("w1", "w2", "region"), cluster=None, weight=None, where=None):
    return Spec("y", ("x",), tuple(f"z{k + 1}" for k in range(k_z)), controls=controls,
                cluster=cluster, weight=weight, where=where)


def design_frame(frame, controls):
    """Regressors of the reference fits: numeric controls, region indicators (first dropped)."""
    parts = [frame[[c for c in controls if c != "region"]]]
    if "region" in controls:
        parts.append(pd.get_dummies(frame["region"], prefix="region", drop_first=True,
                                    dtype=float))
    return pd.concat(parts, axis=1).assign(const=1.0)


def ref_coef(frame, dep, controls, instruments, weight=None, se="classic", cluster=None):
    """reference library: linearmodels OLS (IV2SLS with no endogenous regressor)."""
    exog = pd.concat([design_frame(frame, controls), frame[list(instruments)]], axis=1)
    kwargs = {"cov_type": COV[se], "debiased": False}
    if se == "cluster":
        kwargs["clusters"] = frame[cluster]
    return IV2SLS(frame[dep], exog, None, None,
                  weights=None if weight is None else frame[weight]).fit(**kwargs)


def quiet(func, *args, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WeakInstrumentWarning)
        return func(*args, **kwargs)


# ------------------------------------------------------------------ leave-one-out yardsticks
@pytest.mark.parametrize("weight", [None, "wt"])
@pytest.mark.parametrize("k_z", [1, 2])
def test_yardsticks_match_reference_refits(weight, k_z):
    # reference library: linearmodels OLS reduced forms and first stages with and without each
    # control (a text control leaves out all its indicators), 1e-8
    frame = simulated(k_z=k_z)
    controls = ("w1", "w2", "region")
    inst = [f"z{k + 1}" for k in range(k_z)]
    res = calibrate(frame, spec_for(k_z, weight=weight), groups={"shifters": ["w1", "region"]})
    ref_full = ref_coef(frame, "y", controls, inst, weight).params
    fs_full = ref_coef(frame, "x", controls, inst, weight).params
    beta = IV2SLS(frame["y"], design_frame(frame, controls), frame["x"], frame[inst],
                  weights=None if weight is None else frame[weight]).fit().params["x"]
    for name, left_out in [("w1", {"w1"}), ("w2", {"w2"}), ("region", {"region"}),
                           ("shifters", {"w1", "region"})]:
        kept = [c for c in controls if c not in left_out]
        ref_wo = ref_coef(frame, "y", kept, inst, weight).params
        fs_wo = ref_coef(frame, "x", kept, inst, weight).params
        rows = [b for b in res.yardsticks if b.name == name]
        assert [b.instrument for b in rows] == inst
        for b in rows:
            z = b.instrument
            implied = ref_wo[z] - ref_full[z]
            assert b.reduced_form_without == pytest.approx(ref_wo[z], rel=REL)
            assert b.implied_direct == pytest.approx(implied, rel=REL)
            shift = fs_wo[z] - fs_full[z]
            assert b.first_stage_shift["x"] == pytest.approx(shift, rel=REL)
            assert b.implied_direct_net == pytest.approx(implied - shift * beta, rel=REL)
    assert res.estimate["x"] == pytest.approx(beta, rel=REL)


def test_yardstick_units_follow_the_sweep_scale():
    # common practice, no source: the scale is the sweep's (direct_sets.Scale), and a yardstick in
    # rf / sd units is the outcome-unit value divided by ρ / times SD(z)/SD(y)
    frame = simulated(k_z=2)
    spec = spec_for(2)
    res = calibrate(frame, spec)
    sweep = quiet(bounds.sweep, from_frame(frame, spec), direct=["-0.1:0.1", "-0.1:0.1"])
    np.testing.assert_allclose(res.scale.reduced_form, sweep.scale.reduced_form, rtol=1e-12)
    np.testing.assert_allclose(res.scale.instrument_sd, sweep.scale.instrument_sd, rtol=1e-12)
    assert res.scale.outcome_sd == pytest.approx(sweep.scale.outcome_sd, rel=1e-12)
    assert res.scale.outcome_sd == pytest.approx(frame["y"].std(ddof=0), rel=1e-10)
    for b in res.yardsticks:
        k = res.instruments.index(b.instrument)
        assert b.implied_direct_rf == pytest.approx(
            b.implied_direct / res.scale.reduced_form[k], rel=1e-12)
        assert b.implied_direct_sd == pytest.approx(
            b.implied_direct * res.scale.instrument_sd[k] / res.scale.outcome_sd, rel=1e-12)


def test_sweep_range_contains_the_yardstick_and_parses():
    # common practice, no source: the offered range is symmetric, rounded outwards, and is a
    # valid --direct range
    res = calibrate(simulated(), spec_for())
    for b in res.yardsticks:
        spec = parse_range(b.sweep_option.removeprefix("--direct="))
        assert spec.unit == ""
        assert spec.low == -spec.high
        assert spec.high >= abs(b.implied_direct)
        assert spec.high <= abs(b.implied_direct) * (1 + 1e-3)


def test_yardsticks_scale_with_the_outcome_and_ignore_row_order():
    # common practice, no source: y → 10·y scales outcome-unit yardsticks by 10 and leaves
    # shares of the reduced form unchanged; permuting rows changes nothing
    frame = simulated()
    base = calibrate(frame, spec_for())
    scaled = calibrate(frame.assign(y=10.0 * frame["y"]), spec_for())
    shuffled = calibrate(frame.sample(frac=1.0, random_state=3), spec_for())
    for b0, b1, b2 in zip(base.yardsticks, scaled.yardsticks, shuffled.yardsticks):
        assert b1.implied_direct == pytest.approx(10.0 * b0.implied_direct, rel=1e-9)
        assert b1.implied_direct_rf == pytest.approx(b0.implied_direct_rf, rel=1e-9)
        assert b1.implied_direct_sd == pytest.approx(b0.implied_direct_sd, rel=1e-9)
        assert b2.implied_direct == pytest.approx(b0.implied_direct, rel=1e-9)


def test_yardsticks_need_one_pass_and_streaming_agrees(tmp_path):
    # common practice, no source: every yardstick comes from the moments of one pass; a file
    # streamed in small chunks gives the frame's numbers
    frame = simulated()
    source = from_frame(frame, spec_for())

    class Counting:
        spec, layout = source.spec, source.layout
        passes = 0

        def chunks(self):
            Counting.passes += 1
            return source.chunks()

    res = calibrate(Counting(), groups={"pair": ["w1", "w2"]})
    assert Counting.passes == 1
    path = tmp_path / "d.csv"
    frame.to_csv(path, index=False)
    streamed = calibrate(from_file(path, spec_for(), chunk_rows=97))
    for a, b in zip(res.yardsticks, streamed.yardsticks):
        assert b.implied_direct == pytest.approx(a.implied_direct, rel=1e-9)


def test_no_controls_gives_no_yardsticks_with_a_note():
    res = calibrate(simulated(), spec_for(controls=()))
    assert res.yardsticks == ()
    assert any("no leave-one-out yardsticks" in n for n in res.notes)
    assert res.to_dict()["yardsticks"] == []


@pytest.mark.parametrize("groups,fragment", [
    ({"pair": ["w1", "nope"]}, "'nope'"),
    ({"w1": ["w2"]}, "already the name"),
    ({"empty": []}, "names no columns"),
])
def test_bad_groups(groups, fragment):
    with pytest.raises(InputError, match=fragment):
        calibrate(simulated(), spec_for(), groups=groups)


@pytest.mark.parametrize("text", ["pair", "=w1", "pair=", "pair= , "])
def test_bad_group_text(text):
    with pytest.raises(InputError, match="NAME=COL1,COL2"):
        parse_group(text)


# ------------------------------------------------------------------ zero first stage
@pytest.mark.parametrize("se,weight", [("classic", None), ("robust", None),
                                       ("cluster", None), ("classic", "wt"), ("robust", "wt")])
@pytest.mark.parametrize("k_z", [1, 2])
def test_zero_first_stage_matches_reference_on_subgroup(se, weight, k_z):
    # reference library: linearmodels OLS of y and of x on the rows with nofs == 1, with the
    # same covariance and weights (1e-8); F is the Wald statistic of the instruments over k_z
    frame = simulated(k_z=k_z)
    cluster = "g" if se == "cluster" else None
    res = calibrate(frame, spec_for(k_z, cluster=cluster, weight=weight),
                    no_first_stage_group="nofs", se=se)
    zfs = res.zero_first_stage
    sub = frame[frame["nofs"] == 1]
    inst = [f"z{k + 1}" for k in range(k_z)]
    ref_y = ref_coef(sub, "y", ("w1", "w2", "region"), inst, weight, se=se, cluster=cluster)
    ref_x = ref_coef(sub, "x", ("w1", "w2", "region"), inst, weight, se=se, cluster=cluster)
    assert zfs.n == len(sub)
    np.testing.assert_allclose(zfs.direct, ref_y.params[inst], rtol=REL)
    np.testing.assert_allclose(zfs.se, ref_y.std_errors[inst], rtol=REL)
    np.testing.assert_allclose(zfs.covariance, ref_y.cov.loc[inst, inst], rtol=REL)
    pi = ref_x.params[inst].to_numpy()
    wald = float(pi @ np.linalg.solve(ref_x.cov.loc[inst, inst].to_numpy(), pi))
    assert zfs.first_stage_f["x"] == pytest.approx(wald / k_z, rel=1e-7)
    assert [zfs.first_stage["x"][z] for z in inst] == pytest.approx(list(pi), rel=REL)
    assert not zfs.premise_doubtful


def test_zero_first_stage_recovers_the_designed_direct_effect():
    # van Kippersluis & Rietveld (2018): with no first stage in the subgroup its reduced form
    # is the direct effect (designed truth 0.1; simulation, common practice no source)
    frame = simulated(n=20000, seed=5, direct=0.1)
    res = calibrate(frame, spec_for(), no_first_stage_group="nofs")
    zfs = res.zero_first_stage
    assert abs(zfs.direct[0] - 0.1) < 4 * zfs.se[0]
    assert zfs.first_stage_f["x"] < 10
    # while the full-sample 2SLS that ignores the direct effect is biased away from 0.5
    assert res.estimate["x"] > 0.5 + 0.05


def test_zero_first_stage_offers_prior_and_range():
    # common practice, no source: the prior is normal:DIRECT:SE and the range DIRECT ± z·SE,
    # both valid inputs of the prior and sweep commands
    res = calibrate(simulated(k_z=2), spec_for(2), no_first_stage_group="nofs")
    zfs = res.zero_first_stage
    z95 = 1.959963984540054  # normal quantile 0.975, from memory
    for k, (text, rng_text) in enumerate(zip(zfs.prior_options, zfs.sweep_options)):
        law = parse_prior(text)
        assert law.kind == "normal"
        assert law.params[0] == pytest.approx(zfs.direct[k], rel=1e-3)
        assert zfs.se[k] <= law.params[1] <= zfs.se[k] * (1 + 1e-3)
        r = parse_range(rng_text.removeprefix("--direct="))
        assert r.low <= zfs.direct[k] - z95 * zfs.se[k]
        assert r.high >= zfs.direct[k] + z95 * zfs.se[k]
        assert r.high - r.low <= 2 * z95 * zfs.se[k] * (1 + 1e-2)
    commands = {(s["command"], s["source"]) for s in res.suggestions()}
    assert ("prior", "zero first stage in nofs == 1") in commands


def test_zero_first_stage_warns_when_the_premise_looks_false():
    # common practice, no source: a random subgroup has the full first stage (F far above 10)
    with pytest.warns(UserWarning, match="premise"):
        res = calibrate(simulated(), spec_for(), no_first_stage_group="strongfs")
    assert res.zero_first_stage.premise_doubtful
    assert res.zero_first_stage.first_stage_f["x"] >= 10
    assert any("premise" in n for n in res.notes)


def test_treatment_constant_in_subgroup_has_zero_first_stage():
    # van Kippersluis & Rietveld (2018): a group that cannot take the treatment has a zero
    # first stage by construction; the reduced form there is still estimable
    frame = simulated()
    frame.loc[frame["nofs"] == 1, "x"] = 0.0
    zfs = calibrate(frame, spec_for(), no_first_stage_group="nofs").zero_first_stage
    assert zfs.first_stage_f["x"] == 0.0
    assert zfs.first_stage_p_value["x"] == 1.0
    ref = ref_coef(frame[frame["nofs"] == 1], "y", ("w1", "w2", "region"), ["z1"],
                   se="robust")
    assert zfs.direct[0] == pytest.approx(ref.params["z1"], rel=REL)


def test_controls_constant_in_subgroup_are_dropped_there():
    # common practice, no source: the subgroup marker itself, a control that is zero inside
    # the subgroup and a text control with one level there carry no information in the
    # subgroup and are left out of its regressions
    frame = simulated()
    frame["marker"] = (1 - frame["nofs"]) * frame["w2"]
    frame.loc[frame["nofs"] == 1, "region"] = "north"
    spec = spec_for(controls=("w1", "region", "marker", "nofs"))
    res = calibrate(frame, spec, no_first_stage_group="nofs")
    zfs = res.zero_first_stage
    assert set(zfs.controls_dropped) == {"nofs", "region", "marker"}
    ref = ref_coef(frame[frame["nofs"] == 1], "y", ("w1",), ["z1"], se="robust")
    assert zfs.direct[0] == pytest.approx(ref.params["z1"], rel=REL)
    assert any("left out of its regressions" in n for n in res.notes)


@pytest.mark.parametrize("mutate,column,fragment", [
    (lambda f: f.assign(nofs=f["nofs"] * 2), "nofs", "not binary"),
    (lambda f: f, "region", "not binary"),
    (lambda f: f, "missing_col", "not found"),
    (lambda f: f.assign(nofs=0), "nofs", "no row equal to 1"),
    (lambda f: f.assign(nofs=(np.arange(len(f)) < 4).astype(int)), "nofs", "too small"),
    (lambda f: f.assign(z1=np.where(f["nofs"] == 1, 2.0, f["z1"])), "nofs", "constant"),
    (lambda f: f, "z1", "instrument"),
])
def test_bad_subgroups(mutate, column, fragment):
    frame = mutate(simulated())
    with pytest.raises(InputError, match=fragment):
        calibrate(frame, spec_for(), no_first_stage_group=column)


def test_subgroup_needs_rows_not_a_prepared_source():
    with pytest.raises(InputError, match="DataFrame or the path"):
        calibrate(from_frame(simulated(), spec_for()), no_first_stage_group="nofs")


def test_missing_subgroup_marker_counts_as_outside():
    # common practice, no source: rows whose marker is missing are not in the subgroup
    frame = simulated()
    frame["nofs"] = frame["nofs"].astype(float)
    frame.loc[:9, "nofs"] = np.nan
    res = calibrate(frame, spec_for(), no_first_stage_group="nofs")
    assert res.zero_first_stage.n == int((frame["nofs"] == 1).sum())
    assert res.zero_first_stage.n_marker_missing == 10
    assert any("10 row(s) have no value of nofs" in n for n in res.notes)


# ------------------------------------------------------------------ command line
BASE = ("--outcome", "maize_yield", "--treatment", "irrigation_hours", "--instrument",
        "height_m", "--control", "plot_ha", "--control", "soil", "--cluster", "village")


def invoke(*args):
    return runner.invoke(app, [str(a) for a in args])


def bad(result, *fragments):
    assert result.exit_code == 2, (result.exit_code, result.stdout, result.stderr)
    assert "Traceback" not in result.stderr and result.stdout == ""
    for fragment in fragments:
        assert fragment.lower() in result.stderr.lower(), result.stderr


def test_cli_json_contract_on_the_example(tmp_path):
    # common practice, no source: one JSON document with the contract keys (invented data)
    out = tmp_path / "cal"
    result = invoke("calibrate", EXAMPLE, *BASE, "--group", "terrain=plot_ha,soil", "--json",
                    "--out", out)
    assert result.exit_code == 0, result.stderr
    doc = json.loads(result.stdout)
    assert set(doc["scale"]) == {"reduced_form", "outcome_sd", "instrument_sd"}
    assert doc["scale"]["reduced_form"]["height_m"] < 0
    assert [b["name"] for b in doc["yardsticks"]] == ["plot_ha", "soil", "terrain"]
    for b in doc["yardsticks"]:
        assert {"name", "implied_direct", "implied_direct_rf", "implied_direct_sd",
                "sweep_direct"} <= set(b)
    assert doc["zero_first_stage"] is None
    assert doc["assumptions"] and "prove" in doc["caution"]
    assert json.loads((out / "calibrate.json").read_text()) == doc
    assert "| left out |" in (out / "calibrate.md").read_text()


def test_cli_suggested_range_runs_in_sweep():
    # common practice, no source: the option calibrate offers is accepted by sweep
    doc = json.loads(invoke("calibrate", EXAMPLE, *BASE, "--json").stdout)
    option = doc["yardsticks"][1]["sweep_direct"]
    result = invoke("sweep", EXAMPLE, *BASE, option, "--json")
    assert result.exit_code == 0, result.stderr
    assert json.loads(result.stdout)["direct_set"][0][1] >= abs(
        doc["yardsticks"][1]["implied_direct"])


def test_cli_text_output_reads_both_ways():
    result = invoke("calibrate", EXAMPLE, *BASE)
    assert result.exit_code == 0, result.stderr
    for fragment in ("share of RF", "SD units", "Suggestions", "Assumptions", "Caution"):
        assert fragment in result.stdout


def test_cli_zero_first_stage(tmp_path):
    # invented data: a marker for clay plots; height moves irrigation there too, so the
    # premise looks false and a warning goes to stderr while stdout stays one JSON document
    frame = pd.read_csv(EXAMPLE).assign(clay=lambda f: (f["soil"] == "clay").astype(int))
    path = tmp_path / "irrigation_clay.csv"
    frame.to_csv(path, index=False)
    result = invoke("calibrate", path, *BASE, "--no-first-stage-group", "clay", "--json")
    assert result.exit_code == 0, result.stderr
    doc = json.loads(result.stdout)
    zfs = doc["zero_first_stage"]
    assert {"first_stage_f", "direct", "se", "prior", "sweep_direct"} <= set(zfs)
    assert zfs["first_stage_f"]["irrigation_hours"] >= 10
    assert "premise" in result.stderr
    assert zfs["prior"][0].startswith("normal:")


@pytest.mark.parametrize("extra,fragments", [
    (("--no-first-stage-group", "soil"), ("'soil'", "not binary")),
    (("--no-first-stage-group", "nope"), ("'nope'", "not found")),
    (("--group", "terrain"), ("NAME=COL1,COL2",)),
    (("--group", "terrain=plot_ha,village"), ("'village'", "not controls")),
    (("--group", "a=plot_ha", "--group", "a=soil"), ("twice",)),
    (("--se", "cluster", "--cluster", "nope"), ("'nope'",)),
    (("--level", "1.5"), ("--level",)),
])
def test_cli_bad_input_exits_2(extra, fragments):
    bad(invoke("calibrate", EXAMPLE, *BASE, *extra), *fragments)


def test_cli_bad_input_writes_nothing(tmp_path):
    out = tmp_path / "never"
    bad(invoke("calibrate", EXAMPLE, *BASE, "--no-first-stage-group", "soil", "--out", out),
        "not binary")
    assert not out.exists()


def test_marker_counts_follow_the_row_filter():
    # common practice, no source: the subgroup is read among the rows --where keeps, so its
    # missing markers are counted there, and a filter that keeps no marked row is refused
    frame = simulated()
    frame["nofs"] = frame["nofs"].astype(float)
    frame.loc[:9, "nofs"] = np.nan
    frame["late"] = (np.arange(len(frame)) >= 5).astype(int)
    res = calibrate(frame, spec_for(where="late == 1"), no_first_stage_group="nofs")
    assert res.zero_first_stage.n_marker_missing == 5
    assert res.zero_first_stage.n == int(((frame["nofs"] == 1) & (frame["late"] == 1)).sum())
    with pytest.raises(InputError, match="no row equal to 1 among the rows --where keeps"):
        calibrate(frame, spec_for(where="nofs == 0"), no_first_stage_group="nofs")
