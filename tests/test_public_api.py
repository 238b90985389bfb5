"""The public face of the package: ``import sensiv; sensiv.fit(...)`` and friends, loaded
lazily (common practice for scientific packages, no source)."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

import sensiv
from sensiv.api import functions
from sensiv.data import Spec, from_file
from sensiv.estimation import iv
from sensiv.partial_id import discrete
from sensiv.recipes import run
from sensiv.sensitivity import bounds, published

ROOT = Path(__file__).resolve().parents[1]


def test_importing_sensiv_loads_no_numerical_library():
    code = ("import sys, sensiv; print(sorted(m for m in ('numpy', 'pandas', 'scipy', 'cvxpy', "
            "'matplotlib') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, cwd=ROOT)
    assert out.stdout.strip() == "[]"


@pytest.mark.parametrize("name, function", [
    ("fit", functions.fit), ("sweep", functions.sweep), ("prior", functions.prior),
    ("corrbound", functions.corrbound), ("discrete", discrete.discrete_bounds),
    ("published", published.published_analysis), ("calibrate", functions.calibrate),
    ("run_recipe", run.run_recipe)])
def test_public_names_are_the_analyses(name, function):
    assert getattr(sensiv, name) is function
    assert name in dir(sensiv) and name in sensiv.__all__


def test_unknown_name_is_an_attribute_error():
    with pytest.raises(AttributeError, match="no attribute 'sweeps'"):
        sensiv.sweeps  # noqa: B018


def test_public_face_runs_the_readme_analysis():
    spec = Spec("maize_yield", ["irrigation_hours"], ["height_m"],
                controls=["plot_ha", "soil"], cluster="village")
    source = from_file(ROOT / "examples" / "irrigation.csv", spec)
    fit = sensiv.fit(source)
    sweep = sensiv.sweep(source, direct=["-0.005:0.005"])
    # at zero direct effect the sweep's estimate is the 2SLS estimate (common practice)
    assert sweep.estimate == pytest.approx(fit.tsls.value("irrigation_hours"), rel=1e-12)
    assert sweep.union_ci.low <= sweep.identified_set.low <= sweep.identified_set.high \
        <= sweep.union_ci.high


def test_run_recipe_takes_a_path(tmp_path):
    (tmp_path / "r.toml").write_text(
        f'[data]\npath = "{(ROOT / "examples" / "nudge.csv").as_posix()}"\n'
        'outcome = "bp_controlled"\ntreatments = ["screened"]\ninstruments = ["sms"]\n'
        '[[analysis]]\nkind = "fit"\n', encoding="utf-8")
    result = sensiv.run_recipe(tmp_path / "r.toml")
    assert [r.analysis.kind for r in result.runs] == ["fit"]
    assert isinstance(result.runs[0].result, iv.IVFit)


def test_public_sweep_is_the_layer_sweep_with_keyword_roles():
    # the API only normalises arguments: the same numbers as the layer function (common
    # practice, no source)
    spec = Spec("maize_yield", ["irrigation_hours"], ["height_m"],
                controls=["plot_ha", "soil"], cluster="village")
    path = ROOT / "examples" / "irrigation.csv"
    layer = bounds.sweep(from_file(path, spec), direct=["-0.005:0.005"])
    public = sensiv.sweep(path, outcome="maize_yield", treatment="irrigation_hours",
                          instruments="height_m", controls=["plot_ha", "soil"],
                          cluster="village", direct="-0.005:0.005")
    assert public.to_dict() == layer.to_dict()
