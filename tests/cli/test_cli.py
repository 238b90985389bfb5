"""The command line: README examples, the JSON contract, and exit code 2 on bad input.

Checks here are common practice, no source, except where a reference library is named.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from sensiv.cli.app import app

ROOT = Path(__file__).resolve().parents[2]
EXAMPLE = ROOT / "examples" / "irrigation.csv"
runner = CliRunner()


def invoke(*args: str):
    return runner.invoke(app, [str(a) for a in args])


@pytest.fixture()
def data(tmp_path) -> Path:
    rng = np.random.default_rng(4)
    n = 400
    z = rng.normal(size=n)
    x = 0.8 * z + rng.normal(size=n)
    frame = pd.DataFrame({
        "y": 1.0 + 0.5 * x + rng.normal(size=n),
        "x": x,
        "z": z,
        "z2": rng.normal(size=n) + 0.3 * x,
        "w": rng.normal(size=n),
        "g": rng.integers(0, 20, n),
        "wt": rng.uniform(0.5, 2.0, n),
        "label": rng.choice(["a", "b"], n),
        "one": 1.0,
        "single_group": 7,
    })
    path = tmp_path / "d.csv"
    frame.to_csv(path, index=False)
    return path


BASE = ("--outcome", "y", "--treatment", "x", "--instrument", "z")


# ------------------------------------------------------------------ README examples
def test_readme_demo(tmp_path):
    # the full bundle is checked in tests/recipes/test_bundle.py; here what the terminal shows
    out = tmp_path / "demo"
    result = invoke("demo", "--out", out)
    assert result.exit_code == 0, result.stderr
    assert "INVENTED" in result.stdout
    for words in ("== irrigation ==", "== nudge ==", "== published ==", "Anderson–Rubin set",
                  "direct-effect sweep", "Truth check", "Caution"):
        assert words in result.stdout
    assert (out / "report.html").exists()


def test_readme_demo_json(tmp_path):
    result = invoke("demo", "--out", tmp_path / "d", "--json")
    assert result.exit_code == 0
    assert set(json.loads(result.stdout)["studies"]) == {"irrigation", "nudge", "published"}


def test_readme_fit_example():
    result = invoke("fit", EXAMPLE, "--outcome", "maize_yield", "--treatment",
                    "irrigation_hours", "--instrument", "height_m", "--control", "plot_ha",
                    "--control", "soil", "--se", "cluster", "--cluster", "village")
    assert result.exit_code == 0, result.stderr
    assert "irrigation_hours" in result.stdout
    assert "soil[loam]" in result.stdout
    assert "exclusion restriction" in result.stdout


def test_fit_json_is_one_document_with_contract_keys(data):
    result = invoke("fit", data, *BASE, "--instrument", "z2", "--control", "w", "--json")
    assert result.exit_code == 0, result.stderr
    doc = json.loads(result.stdout)
    for key in ("n", "n_dropped", "coef", "se", "ci", "ols", "first_stage", "ar_set", "overid"):
        assert key in doc
    assert set(doc["coef"]) == {"x", "w"}
    assert doc["overid"]["df"] == 1
    assert doc["caution"] and doc["assumptions"]


def test_fit_writes_out_dir(data, tmp_path):
    out = tmp_path / "fitout"
    result = invoke("fit", data, *BASE, "--out", out, "--small", "--se", "classic")
    assert result.exit_code == 0, result.stderr
    assert json.loads((out / "fit.json").read_text())["small"] is True
    assert "| coefficient |" in (out / "fit.md").read_text()


def test_weak_instrument_message_in_json_notes(tmp_path):
    rng = np.random.default_rng(0)
    n = 300
    frame = pd.DataFrame({"y": rng.normal(size=n), "x": rng.normal(size=n),
                          "z": rng.normal(size=n)})
    path = tmp_path / "weak.csv"
    frame.to_csv(path, index=False)
    result = invoke("fit", path, *BASE, "--json")
    assert result.exit_code == 0
    doc = json.loads(result.stdout)
    assert any("weak instrument" in note for note in doc["notes"])
    assert None in [end for piece in doc["ar_set"] for end in piece]


def test_parquet_and_stata_inputs(data, tmp_path):
    frame = pd.read_csv(data)
    frame.to_parquet(tmp_path / "d.parquet")
    frame.drop(columns=["label"]).to_stata(tmp_path / "d.dta", write_index=False)
    results = [json.loads(invoke("fit", tmp_path / name, *BASE, "--json").stdout)
               for name in ("d.parquet", "d.dta")]
    csv = json.loads(invoke("fit", data, *BASE, "--json").stdout)
    for doc in results:
        assert doc["coef"]["x"] == pytest.approx(csv["coef"]["x"], rel=1e-12)


# ------------------------------------------------------------------ bad input: exit code 2
def bad(result, *fragments: str) -> None:
    assert result.exit_code == 2, (result.exit_code, result.stdout, result.stderr)
    assert "Traceback" not in result.stderr and "Traceback" not in result.stdout
    assert result.stdout == ""
    message = result.stderr.lower()
    for fragment in fragments:
        assert fragment.lower() in message, message


def test_missing_file(tmp_path):
    bad(invoke("fit", tmp_path / "none.csv", *BASE), "none.csv", "does not exist")


def test_empty_file(tmp_path):
    path = tmp_path / "empty.csv"
    path.write_text("")
    bad(invoke("fit", path, *BASE), "empty")


def test_unreadable_file(tmp_path):
    path = tmp_path / "broken.parquet"
    path.write_bytes(b"this is not parquet")
    bad(invoke("fit", path, *BASE), "broken.parquet")


def test_unknown_column_suggests_closest(data):
    bad(invoke("fit", data, "--outcome", "y", "--treatment", "xx", "--instrument", "z"),
        "'xx'", "did you mean")


def test_column_in_two_roles(data):
    bad(invoke("fit", data, "--outcome", "y", "--treatment", "x", "--instrument", "x"), "'x'")


def test_non_numeric_outcome(data):
    bad(invoke("fit", data, "--outcome", "label", "--treatment", "x", "--instrument", "z"),
        "label", "numeric")


def test_nan_only_column(data, tmp_path):
    frame = pd.read_csv(data).assign(w=np.nan)
    path = tmp_path / "nan.csv"
    frame.to_csv(path, index=False)
    bad(invoke("fit", path, *BASE, "--control", "w"), "'w'")


def test_infinite_values(data, tmp_path):
    frame = pd.read_csv(data)
    frame.loc[3, "z"] = np.inf
    path = tmp_path / "inf.parquet"
    frame.to_parquet(path)
    bad(invoke("fit", path, *BASE), "'z'", "infinite")


def test_constant_instrument(data):
    bad(invoke("fit", data, "--outcome", "y", "--treatment", "x", "--instrument", "one"),
        "'one'", "constant")


def test_instrument_collinear_with_controls(data, tmp_path):
    frame = pd.read_csv(data)
    frame["zcopy"] = 2.0 * frame["w"] + 1.0
    path = tmp_path / "col.csv"
    frame.to_csv(path, index=False)
    bad(invoke("fit", path, "--outcome", "y", "--treatment", "x", "--instrument", "zcopy",
               "--control", "w"), "'zcopy'", "collinear")


def test_fewer_instruments_than_treatments(data):
    bad(invoke("fit", data, "--outcome", "y", "--treatment", "x", "--treatment", "w",
               "--instrument", "z"), "instrument")


def test_fewer_rows_than_parameters(data, tmp_path):
    path = tmp_path / "tiny.csv"
    pd.read_csv(data).head(3).to_csv(path, index=False)
    bad(invoke("fit", path, *BASE, "--control", "w"), "rows")


def test_cluster_with_one_group(data):
    bad(invoke("fit", data, *BASE, "--cluster", "single_group"), "single_group", "1 group")


def test_non_positive_weights(data, tmp_path):
    frame = pd.read_csv(data)
    frame.loc[5, "wt"] = 0.0
    frame.loc[6, "wt"] = -1.0
    path = tmp_path / "wt.csv"
    frame.to_csv(path, index=False)
    bad(invoke("fit", path, *BASE, "--weight", "wt"), "'wt'")


@pytest.mark.parametrize("level", ["0", "1", "1.5", "-0.2"])
def test_level_outside_unit_interval(data, level):
    bad(invoke("fit", data, *BASE, "--level", level), "--level", "(0, 1)")


def test_cluster_se_without_cluster(data):
    bad(invoke("fit", data, *BASE, "--se", "cluster"), "--cluster")


def test_unknown_se_type(data):
    bad(invoke("fit", data, *BASE, "--se", "hc3"), "hc3", "classic")


def test_bad_input_leaves_no_output_dir(data, tmp_path):
    out = tmp_path / "never"
    bad(invoke("fit", data, "--outcome", "y", "--treatment", "x", "--instrument", "one",
               "--out", out), "constant")
    assert not out.exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".never")]


def test_readme_python_example(monkeypatch, capsys):
    # the Python block of the README runs as written (from the repository root)
    import re

    text = (ROOT / "README.md").read_text(encoding="utf-8")
    blocks = re.findall(r"```python\n(.*?)```", text, flags=re.S)
    assert blocks, "README has a Python example"
    monkeypatch.chdir(ROOT)
    for block in blocks:
        exec(compile(block, "README.md", "exec"), {})
    assert "irrigation_hours" in capsys.readouterr().out


def _readme_commands() -> list[list[str]]:
    """Every `sensiv ...` command in the README's bash blocks (continuations joined)."""
    import re
    import shlex

    text = (ROOT / "README.md").read_text(encoding="utf-8")
    commands = []
    for block in re.findall(r"```bash\n(.*?)```", text, flags=re.S):
        joined = block.replace("\\\n", " ")
        for line in joined.splitlines():
            line = line.split("#", 1)[0].strip()
            if "sensiv " not in line or line.startswith("python"):
                continue
            command = line.split("&&")[-1].strip()
            if command.startswith("sensiv "):
                commands.append(shlex.split(command)[1:])
    return commands


def test_readme_lists_commands():
    shown = {c[0] for c in _readme_commands()}
    assert {"demo", "fit", "sweep", "prior", "corrbound", "discrete"} <= shown


@pytest.mark.parametrize("args", _readme_commands(), ids=lambda a: " ".join(a[:2]))
def test_every_readme_command_runs(args, tmp_path, monkeypatch):
    # each command exactly as the README prints it, from the repository root
    monkeypatch.chdir(ROOT)
    args = list(args)
    if "--out" in args:  # keep the repository clean: outputs go to a temporary folder
        args[args.index("--out") + 1] = str(tmp_path / "out")
    elif args[0] in ("demo", "run"):
        args += ["--out", str(tmp_path / "out")]
    result = runner.invoke(app, args)
    assert result.exit_code == 0, result.stderr
    assert result.stdout.strip()
    assert "Traceback" not in result.stderr
