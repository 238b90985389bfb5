"""``sensiv published --per-instrument``: output keys, bad input (exit 2 naming the problem),
the recipe kind, and IVW against 2SLS on simulated individual-level data."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from sensiv.cli import app

runner = CliRunner()
ROOT = Path(__file__).resolve().parents[2]
TABLE = ROOT / "examples" / "per_instrument.csv"     # INVENTED table (sensiv.demo)
COLUMNS = ["--first-stage", "beta_exposure", "--first-stage-se", "se_exposure",
           "--reduced-form", "beta_outcome", "--reduced-form-se", "se_outcome"]


def invoke(*args):
    return runner.invoke(app, ["published", *map(str, args)])


def write(tmp_path, frame, name="t.csv"):
    path = tmp_path / name
    frame.to_csv(path, index=False)
    return path


def test_json_keys_and_seeded_bootstrap():
    args = ["--per-instrument", TABLE, *COLUMNS, "--name", "variant", "--seed", "3",
            "--reps", "200", "--json"]
    result = invoke(*args)
    assert result.exit_code == 0, result.output
    doc = json.loads(result.stdout)
    assert {"ivw", "ivw_by_weights", "yardsticks", "instruments", "assumptions",
            "caution"} <= set(doc)
    assert set(doc["yardsticks"]) == {"egger", "weighted_median", "mode"}
    assert doc["instruments"][0]["name"] == "v01" and len(doc["instruments"]) == 25
    assert "population structure" in doc["caution"] and "assortative mating" in doc["caution"]
    assert doc["yardsticks"]["weighted_median"]["seed"] == 3
    again = json.loads(invoke(*args).stdout)
    assert again["yardsticks"] == doc["yardsticks"]      # the seed reproduces the bootstraps
    second = json.loads(invoke(*args, "--weights", "second").stdout)
    assert second["ivw"] == doc["ivw_by_weights"]["second"]


def test_out_writes_report_tables_and_scatter(tmp_path):
    result = invoke("--per-instrument", TABLE, *COLUMNS, "--seed", "1", "--reps", "100",
                    "--out", tmp_path / "out")
    assert result.exit_code == 0, result.output
    names = {p.name for p in (tmp_path / "out").iterdir()}
    assert {"per_instrument.json", "per_instrument.md", "per_instrument-scatter.png",
            "per_instrument-table.csv"} <= names
    assert "Caution" in (tmp_path / "out" / "per_instrument.md").read_text()


def base_frame():
    return pd.read_csv(TABLE).head(6)


@pytest.mark.parametrize("change, words", [
    (lambda f: f.assign(beta_exposure=[0.0, *f.beta_exposure[1:]]),
     ["first-stage association", "is 0"]),
    (lambda f: f.assign(se_outcome=[-0.01, *f.se_outcome[1:]]), ["reduced-form SE", "> 0"]),
    (lambda f: f.drop(columns="se_exposure"), ["se_exposure", "--first-stage-se", "not in"]),
    (lambda f: f.assign(beta_outcome=["abc", *f.beta_outcome[1:].astype(str)]),
     ["beta_outcome", "not a number", "row 1"]),
    (lambda f: f.head(2), ["MR-Egger", "at least 3"]),
])
def test_bad_table_exits_2_naming_the_problem(tmp_path, change, words):
    # common practice, no source: each mistake named in one message, no traceback
    path = write(tmp_path, change(base_frame()))
    result = invoke("--per-instrument", path, *COLUMNS)
    assert result.exit_code == 2
    assert "Traceback" not in result.output
    for word in words:
        assert word in result.output


@pytest.mark.parametrize("args, words", [
    (["--estimate", "0.3"], ["--estimate", "do not apply"]),
    (["--weights", "third"], ["--weights", "first"]),
    (["--reps", "1"], ["--reps"]),
])
def test_bad_options_with_a_table(args, words):
    result = invoke("--per-instrument", TABLE, *COLUMNS, *args)
    assert result.exit_code == 2
    for word in words:
        assert word in result.output


def test_missing_role_column_option():
    result = invoke("--per-instrument", TABLE, "--first-stage", "beta_exposure")
    assert result.exit_code == 2 and "--reduced-form-se" in result.output


def test_table_options_refused_in_single_mode():
    result = invoke("--estimate", "0.75", "--se", "0.25", "--first-stage", "4.2",
                    "--first-stage-se", "0.6", "--direct=-0.1:0.1", "--seed", "1")
    assert result.exit_code == 2 and "--seed" in result.output


def test_single_mode_number_messages_unchanged():
    # the option parser's own wording for a non-number and a missing option (as before)
    bad = invoke("--estimate", "1", "--se", "0.1", "--first-stage", "abc", "--direct=-1:1")
    assert bad.exit_code == 2
    assert "invalid value for '--first-stage': Input should be a valid number" in bad.output
    gone = invoke("--se", "0.1", "--first-stage", "2", "--direct=-1:1")
    assert gone.exit_code == 2 and "missing option '--estimate'" in gone.output


def test_recipe_runs_the_per_instrument_kind(tmp_path):
    import shutil

    shutil.copy(TABLE, tmp_path / "table.csv")
    recipe = tmp_path / "r.toml"
    recipe.write_text(
        'title = "invented per-instrument table"\nseed = 5\n\n[[study]]\nname = "mr"\n\n'
        '[[study.analysis]]\nkind = "per_instrument"\nper_instrument = "table.csv"\n'
        'first_stage = "beta_exposure"\nfirst_stage_se = "se_exposure"\n'
        'reduced_form = "beta_outcome"\nreduced_form_se = "se_outcome"\nname = "variant"\n'
        'reps = 100\n')
    result = runner.invoke(app, ["run", str(recipe), "--out", str(tmp_path / "out")])
    assert result.exit_code == 0, result.output
    written = "\n".join(p.read_text() for p in (tmp_path / "out").rglob("*.json"))
    assert "weighted_median" in written
    cli = json.loads(invoke("--per-instrument", TABLE, *COLUMNS, "--name", "variant", "--seed",
                            "5", "--reps", "100", "--json").stdout)
    # the recipe's run gives the command's numbers (same seed, same table)
    assert repr(cli["yardsticks"]["weighted_median"]["se"]) in written


def simulated_associations(seed=17, n=20_000, j=10, beta=0.5):
    """Individual-level data with J independent instruments (seed stated) and the
    per-instrument associations by OLS of x and of y on each instrument alone."""
    rng = np.random.default_rng(seed)
    z = rng.binomial(2, 0.3, (n, j)).astype(float)
    u = rng.normal(size=n)
    x = z @ rng.uniform(0.1, 0.3, j) + u + rng.normal(size=n)
    y = beta * x - u + rng.normal(size=n)
    bx, sx, by, sy = [], [], [], []
    for k in range(j):
        zc = z[:, k] - z[:, k].mean()
        for target, b, s in ((x, bx, sx), (y, by, sy)):
            slope = zc @ (target - target.mean()) / (zc @ zc)
            resid = target - target.mean() - slope * zc
            b.append(slope)
            s.append(np.sqrt(resid @ resid / (n - 2) / (zc @ zc)))
    frame = pd.DataFrame({"y": y, "x": x, **{f"z{k}": z[:, k] for k in range(j)}})
    table = pd.DataFrame({"bx": bx, "sx": sx, "by": by, "sy": sy})
    return frame, table


def test_ivw_matches_2sls_on_individual_level_data():
    # common practice: with independent instruments IVW ≈ 2SLS (Burgess, Butterworth &
    # Thompson 2013); simulation with seed 17, J = 10 instruments, n = 20000, one sample
    from sensiv import data as sdata
    from sensiv.estimation import iv
    from sensiv.sensitivity.associations import check_associations, ivw

    frame, t = simulated_associations()
    fit_ivw = ivw(check_associations(first_stage=t.bx, first_stage_se=t.sx,
                                     reduced_form=t.by, reduced_form_se=t.sy))
    spec = sdata.Spec("y", ["x"], [f"z{k}" for k in range(10)])
    tsls = iv.fit(frame, spec, se="classic")
    est, se = tsls.tsls.value("x"), tsls.tsls.std_error("x")
    assert abs(fit_ivw.estimate - est) < se
    assert fit_ivw.se_fixed == pytest.approx(se, rel=0.25)


@pytest.mark.filterwarnings("ignore::UserWarning")
def test_direct_effect_bounds_track_sweep_on_the_same_data(tmp_path):
    # the same box |α_j| ≤ 0.02 on every instrument: the per-instrument (IVW) identified set
    # and union track sensiv's sweep (2SLS) on the individual data within one 2SLS se
    # (common practice: IVW ≈ 2SLS with independent instruments; simulation, seed 17)
    from sensiv import data as sdata
    from sensiv.sensitivity.bounds import sweep

    frame, t = simulated_associations()
    path = write(tmp_path, t)
    doc = json.loads(invoke("--per-instrument", path, "--first-stage", "bx", "--first-stage-se",
                            "sx", "--reduced-form", "by", "--reduced-form-se", "sy",
                            "--direct=-0.02:0.02", "--seed", "1", "--reps", "50",
                            "--json").stdout)
    spec = sdata.Spec("y", ["x"], [f"z{k}" for k in range(10)])
    swept = sweep(frame, spec, direct=["-0.02:0.02"] * 10, se="classic")
    tol = 0.5 * swept.se
    for key in ("identified_set", "union_ci"):
        mine, theirs = doc["direct"][key], getattr(swept, key).to_list()
        assert mine == pytest.approx(theirs, abs=tol), key
    # and the widths grow with the allowance in both
    assert doc["direct"]["identified_set"][1] - doc["direct"]["identified_set"][0] > 0


def test_direct_and_prior_with_a_table():
    result = invoke("--per-instrument", TABLE, *COLUMNS, "--seed", "2", "--reps", "50",
                    "--direct=-2:2se", "--prior", "normal:0:1se", "--json")
    assert result.exit_code == 0, result.output
    doc = json.loads(result.stdout)
    union, ident = doc["direct"]["union_ci"], doc["direct"]["identified_set"]
    assert union[0] <= ident[0] <= ident[1] <= union[1]
    assert doc["prior"]["interval"][0] < doc["ivw"]["estimate"] < doc["prior"]["interval"][1]
    assert doc["invalid_count"]["instruments"] == 25
    bad = invoke("--per-instrument", TABLE, *COLUMNS, "--direct=-2:2sd")
    assert bad.exit_code == 2 and "unit" in bad.output


def test_parquet_table_gives_the_csv_numbers(tmp_path):
    # the same table as Parquet (the data readers' own formats) gives the same IVW
    path = tmp_path / "t.parquet"
    pd.read_csv(TABLE).to_parquet(path)
    one = json.loads(invoke("--per-instrument", path, *COLUMNS, "--seed", "1", "--reps", "20",
                            "--json").stdout)
    two = json.loads(invoke("--per-instrument", TABLE, *COLUMNS, "--seed", "1", "--reps", "20",
                            "--json").stdout)
    assert one["ivw"] == two["ivw"] and one["yardsticks"] == two["yardsticks"]
