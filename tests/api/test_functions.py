"""The API functions call the layer functions with normalised arguments: the same numbers as
the layers (common practice for a thin public face, no source)."""

from __future__ import annotations

from pathlib import Path

import pytest

import sensiv
from sensiv.core.errors import InputError
from sensiv.data import Spec, from_file
from sensiv.estimation import iv
from sensiv.partial_id import correlation
from sensiv.sensitivity import calibrate

ROOT = Path(__file__).resolve().parents[2]
PATH = ROOT / "examples" / "irrigation.csv"   # invented demo data
ROLES = dict(outcome="maize_yield", treatment="irrigation_hours", instruments="height_m",
             controls=["plot_ha", "soil"], cluster="village")
SPEC = Spec("maize_yield", ["irrigation_hours"], ["height_m"], controls=["plot_ha", "soil"],
            cluster="village")


def test_fit_with_keywords_is_the_layer_fit():
    public = sensiv.fit(PATH, **ROLES, se="robust", level=0.9, small=True)
    layer = iv.fit(from_file(PATH, SPEC), se="robust", confidence_level=0.9, small=True)
    assert public.to_dict() == layer.to_dict()


def test_corrbound_with_keywords_is_the_layer_corrbound():
    options = dict(max_ratio=0.5, reps=0, points=5, endogeneity="positive")
    public = sensiv.corrbound(PATH, **ROLES, **options)
    layer = correlation.correlation_bounds(from_file(PATH, SPEC), **options)
    assert public.to_dict() == layer.to_dict()


def test_calibrate_with_keywords_is_the_layer_calibrate():
    public = sensiv.calibrate(PATH, **ROLES)
    layer = calibrate.calibrate(PATH, SPEC)
    assert public.to_dict() == layer.to_dict()


def test_a_spec_still_works_positionally():
    public = sensiv.sweep(PATH, SPEC, direct=["-0.005:0.005"])
    keywords = sensiv.sweep(PATH, **ROLES, direct="-0.005:0.005")
    assert public.to_dict() == keywords.to_dict()


def test_layer_messages_name_keywords():
    with pytest.raises(InputError) as caught:
        sensiv.sweep(PATH, **ROLES, direct=["-0.005:0.005", "-1:1"])
    assert "--" not in str(caught.value)
    with pytest.raises(InputError, match="give either one direct= range per instrument or "
                                         "polytope= FILE"):
        sensiv.sweep(PATH, **ROLES)
    with pytest.raises(InputError, match="points="):
        sensiv.sweep(PATH, **ROLES, direct="-0.005:0.005", points=1)
