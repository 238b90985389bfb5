"""``sensiv published --per-instrument`` with ``--direct-polytope FILE`` (a polytope of direct
effects) and ``--mode-bandwidth PHI`` (the mode-based estimate's bandwidth parameter), on the
command line and in a recipe."""

from __future__ import annotations

import itertools
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
BASE = ["--per-instrument", TABLE, *COLUMNS, "--name", "variant", "--seed", "1",
        "--reps", "50"]


def invoke(*args):
    return runner.invoke(app, ["published", *map(str, args)])


def as_json(*args):
    result = invoke(*args, "--json")
    assert result.exit_code == 0, result.output
    return json.loads(result.stdout)


def box_polytope(path, names, lows, highs):
    """The box ∏[lows_j, highs_j] written as 2J half-spaces ±α_j ≤ bound."""
    rows = []
    for j, name in enumerate(names):
        for sign, bound in ((1.0, highs[j]), (-1.0, -lows[j])):
            rows.append({**{n: 0.0 for n in names}, name: sign, "bound": bound})
    pd.DataFrame(rows).to_csv(path, index=False)
    return path


def test_polytope_of_the_box_gives_the_box_numbers(tmp_path):
    # common practice, no source: a box written as 2J half-spaces is the same set, so every
    # number of the direct-effect analysis must agree (the box in closed form, the polytope
    # by linear programmes)
    table = pd.read_csv(TABLE)
    poly = box_polytope(tmp_path / "p.csv", list(table.variant), -2 * table.se_outcome,
                        2 * table.se_outcome)
    box = as_json(*BASE, "--direct=-2:2se")["direct"]
    via = as_json(*BASE, "--direct-polytope", poly)["direct"]
    assert via["direct_set"]["kind"] == "polytope"
    for key in ("identified_set", "union_ci", "bias_range"):
        np.testing.assert_allclose(via[key], box[key], rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(via["bias_aware"]["ci"], box["bias_aware"]["ci"], rtol=1e-9)
    for key in ("scale", "bias_aware_scale"):
        assert via["breakdown"][key] == pytest.approx(box["breakdown"][key], rel=1e-8)
    np.testing.assert_allclose(via["direct_set"]["upper"], box["direct_set"]["upper"],
                               rtol=1e-9)


def vertices(a, b):
    """Every vertex of {α : Aα ≤ b} in 3 dimensions by brute force (three active rows)."""
    out = []
    for rows in itertools.combinations(range(a.shape[0]), a.shape[1]):
        sub = a[list(rows)]
        if abs(np.linalg.det(sub)) < 1e-12:
            continue
        point = np.linalg.solve(sub, b[list(rows)])
        if np.all(a @ point <= b + 1e-10):
            out.append(point)
    return np.array(out)


def test_polytope_identified_set_against_its_vertices(tmp_path):
    # IVW with first-order weights b_y = β b_x + α: β̂(α) = Σ w b_x (b_y − α) / Σ w b_x²,
    # w = s_y⁻² (Burgess, Butterworth & Thompson 2013); a linear function attains its range
    # over a bounded polytope at a vertex (vertices enumerated by brute force here)
    frame = pd.DataFrame({"bx": [0.10, 0.14, 0.08], "sx": [0.01, 0.01, 0.01],
                          "by": [0.031, 0.047, 0.020], "sy": [0.006, 0.008, 0.005]})
    data = tmp_path / "t.csv"
    frame.to_csv(data, index=False)
    names = ["1", "2", "3"]
    a = np.array([[1, 0, 0], [-1, 0, 0], [0, 1, 0], [0, -1, 0], [0, 0, 1], [0, 0, -1],
                  [1, 1, 1], [-1, -1, -1]], float)
    b = np.array([0.01, 0.01, 0.01, 0.01, 0.01, 0.01, 0.012, 0.004])
    poly = tmp_path / "p.csv"
    pd.DataFrame(np.column_stack([a, b]), columns=[*names, "bound"]).to_csv(poly, index=False)
    doc = as_json("--per-instrument", data, "--first-stage", "bx", "--first-stage-se", "sx",
                  "--reduced-form", "by", "--reduced-form-se", "sy", "--reps", "20",
                  "--seed", "2", "--direct-polytope", poly)
    w = frame.sy.to_numpy() ** -2
    bx, by = frame.bx.to_numpy(), frame.by.to_numpy()
    denominator = (w * bx * bx).sum()
    values = [(w * bx * (by - v)).sum() / denominator for v in vertices(a, b)]
    assert doc["direct"]["identified_set"] == pytest.approx([min(values), max(values)],
                                                            rel=1e-9)


def write_rows(path, rows):
    pd.DataFrame(rows).to_csv(path, index=False)
    return path


@pytest.mark.parametrize("rows, words", [
    ([{"v01": 1.0, "v99": 1.0, "bound": 0.1}], ["v99", "name no instrument"]),
    ([{"v01": 1.0, "bound": 0.1}], ["lacks column", "v02"]),
])
def test_polytope_file_columns_are_checked(tmp_path, rows, words):
    # common practice, no source: a column naming no instrument is a typo, not ignored
    table = pd.read_csv(TABLE)
    full = [{**{n: 0.0 for n in table.variant}, **r} for r in rows]
    if "v02" in words:
        full = rows
    result = invoke(*BASE, "--direct-polytope", write_rows(tmp_path / "p.csv", full))
    assert result.exit_code == 2, result.output
    assert "Traceback" not in result.output
    for word in words:
        assert word in result.output


def polytope_of(table, extra):
    """±α_j ≤ 0.01 for every instrument but the first, plus ``extra`` rows."""
    names = list(table.variant)
    rows = []
    for name in names[1:]:
        for sign in (1.0, -1.0):
            rows.append({**{n: 0.0 for n in names}, name: sign, "bound": 0.01})
    for coefficients, bound in extra:
        rows.append({**{n: 0.0 for n in names}, **coefficients, "bound": bound})
    return rows


@pytest.mark.parametrize("extra, words", [
    ([({"v01": 1.0}, 0.01), ({"v01": -1.0}, -0.02)], ["empty"]),        # α_1 ≤ .01, ≥ .02
    ([({"v01": 1.0}, 0.01)], ["v01", "unbounded"]),                     # α_1 unbounded below
])
def test_infeasible_or_unbounded_polytope_exits_2(tmp_path, extra, words):
    # common practice, no source: no bound holds over an empty or unbounded set
    rows = polytope_of(pd.read_csv(TABLE), extra)
    result = invoke(*BASE, "--direct-polytope", write_rows(tmp_path / "p.csv", rows))
    assert result.exit_code == 2, result.output
    assert "Traceback" not in result.output
    for word in words:
        assert word in result.output


def test_direct_and_polytope_together_exit_2(tmp_path):
    table = pd.read_csv(TABLE)
    poly = box_polytope(tmp_path / "p.csv", list(table.variant), -table.se_outcome,
                        table.se_outcome)
    result = invoke(*BASE, "--direct=-1:1se", "--direct-polytope", poly)
    assert result.exit_code == 2
    assert "--direct" in result.output and "--direct-polytope" in result.output
    assert "not both" in result.output


def test_table_options_refused_in_single_mode(tmp_path):
    single = ["--estimate", "0.75", "--se", "0.25", "--first-stage", "4.2",
              "--first-stage-se", "0.6", "--direct=-0.1:0.1"]
    for option, value in (("--mode-bandwidth", "0.5"), ("--direct-polytope", TABLE)):
        result = invoke(*single, option, value)
        assert result.exit_code == 2
        assert option in result.output and "--per-instrument" in result.output


def test_mode_bandwidth_is_used_and_reported():
    # Hartwig, Davey Smith & Bowden 2017: the bandwidth is φ times the rule-of-thumb one, so
    # the default is φ = 1 and another φ gives another mode-based estimate
    default = as_json(*BASE)["yardsticks"]["mode"]
    narrow = as_json(*BASE, "--mode-bandwidth", "0.25")["yardsticks"]["mode"]
    one = as_json(*BASE, "--mode-bandwidth", "1")["yardsticks"]["mode"]
    assert default["phi"] == 1.0 and narrow["phi"] == 0.25
    assert one == default
    assert narrow["estimate"] != default["estimate"]


@pytest.mark.parametrize("value", ["0", "-1", "nan", "inf"])
def test_bad_mode_bandwidth_exits_2(value):
    result = invoke(*BASE, f"--mode-bandwidth={value}")
    assert result.exit_code == 2
    assert "Traceback" not in result.output
    assert "--mode-bandwidth" in result.output and "> 0" in result.output


def test_recipe_takes_polytope_and_phi(tmp_path):
    # the recipe keys polytope (as for sweep) and phi run what the options do
    import shutil

    table = pd.read_csv(TABLE)
    shutil.copy(TABLE, tmp_path / "table.csv")
    box_polytope(tmp_path / "p.csv", list(table.variant), -2 * table.se_outcome,
                 2 * table.se_outcome)
    recipe = tmp_path / "r.toml"
    recipe.write_text(
        'title = "invented per-instrument table"\nseed = 1\n\n[[study]]\nname = "mr"\n\n'
        '[[study.analysis]]\nkind = "per_instrument"\nper_instrument = "table.csv"\n'
        'first_stage = "beta_exposure"\nfirst_stage_se = "se_exposure"\n'
        'reduced_form = "beta_outcome"\nreduced_form_se = "se_outcome"\nname = "variant"\n'
        'reps = 50\npolytope = "p.csv"\nphi = 0.25\n')
    result = runner.invoke(app, ["run", str(recipe), "--out", str(tmp_path / "out")])
    assert result.exit_code == 0, result.output
    written = "\n".join(p.read_text() for p in (tmp_path / "out").rglob("*.json"))
    cli = as_json(*BASE, "--direct-polytope", tmp_path / "p.csv", "--mode-bandwidth", "0.25")
    assert '"polytope"' in written
    assert repr(cli["direct"]["union_ci"][0]) in written
    assert repr(cli["yardsticks"]["mode"]["estimate"]) in written
