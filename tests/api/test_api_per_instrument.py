"""``sensiv.per_instrument``: the command's result from a frame or a path, messages in API
terms."""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pytest
from typer.testing import CliRunner

import sensiv
from sensiv.cli import app
from sensiv.core.errors import InputError

TABLE = Path(__file__).resolve().parents[2] / "examples" / "per_instrument.csv"   # INVENTED
ROLES = dict(first_stage="beta_exposure", first_stage_se="se_exposure",
             reduced_form="beta_outcome", reduced_form_se="se_outcome", name="variant")


def test_frame_and_path_give_the_command_numbers():
    # common practice, no source: the API and the CLI run the same analysis
    res = sensiv.per_instrument(TABLE, **ROLES, direct="-2:2se", prior="normal:0:1se",
                                seed=4, reps=60, mode_bandwidth=0.5)
    frame = sensiv.per_instrument(pd.read_csv(TABLE), **ROLES, direct="-2:2se",
                                  prior="normal:0:1se", seed=4, reps=60, mode_bandwidth=0.5)
    assert type(res).__name__ == "PublishedTableResult"
    out = CliRunner().invoke(app, [
        "published", "--per-instrument", str(TABLE), "--first-stage", "beta_exposure",
        "--first-stage-se", "se_exposure", "--reduced-form", "beta_outcome",
        "--reduced-form-se", "se_outcome", "--name", "variant", "--direct=-2:2se",
        "--prior", "normal:0:1se", "--seed", "4", "--reps", "60", "--mode-bandwidth", "0.5",
        "--json"])
    cli = json.loads(out.stdout)
    doc = json.loads(json.dumps(res.to_dict()))
    for key in ("ivw", "yardsticks", "direct", "prior", "invalid_count"):
        assert doc[key] == cli[key]
    assert frame.to_dict()["table"] != doc["table"]      # the frame is named as such
    assert frame.to_dict()["yardsticks"] == res.to_dict()["yardsticks"]
    assert "Caution" in str(res)


def test_polars_frame_is_accepted():
    pl = pytest.importorskip("polars")
    res = sensiv.per_instrument(pl.read_csv(TABLE), **ROLES, seed=1, reps=30)
    assert res.associations.count == 25


@pytest.mark.parametrize("kwargs, words", [
    (dict(first_stage="nope"), ["'nope'", "first_stage="]),
    (dict(first_stage=None), ["first_stage="]),
    (dict(mode_bandwidth=0), ["mode_bandwidth=", "> 0"]),
    (dict(direct="-1:1se", polytope=str(TABLE)), ["direct=", "polytope=", "not both"]),
])
def test_errors_in_api_terms(kwargs, words):
    with pytest.raises(InputError) as info:
        sensiv.per_instrument(TABLE, **{**ROLES, **kwargs}, seed=1, reps=30)
    for word in words:
        assert word in str(info.value)
    assert "--" not in str(info.value)
