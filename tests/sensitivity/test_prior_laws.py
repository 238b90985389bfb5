"""Prior laws written in the units of ``--direct`` (``rf``: a share of the reduced form,
``sd``: outcome SDs per instrument SD).

A law in another unit is a location-scale transform of the law in outcome units (common
practice, no source), so the prior interval from ``normal:M:Srf`` must equal the one from
``normal:(M·rf):(S·|rf|)`` in outcome units, with ``rf`` the reduced-form coefficient the sweep
reports for the same data.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from typer.testing import CliRunner

from sensiv.cli import app
from sensiv.core.errors import InputError
from sensiv.data import Spec, from_file
from sensiv.sensitivity import bounds, prior, published
from sensiv.sensitivity.prior_laws import parse_prior

ROOT = Path(__file__).resolve().parents[2]
SPEC = Spec("maize_yield", ["irrigation_hours"], ["height_m"], controls=["plot_ha", "soil"],
            cluster="village")


@pytest.fixture(scope="module")
def source():
    return from_file(ROOT / "examples" / "irrigation.csv", SPEC)


@pytest.fixture(scope="module")
def reduced_form(source):
    # the sweep's own reading of a share of the reduced form: --direct=0:1rf spans [0, rf]
    res = bounds.sweep(source, direct=["0:1rf"])
    box = res.direct_set[0]
    return box.high if box.low == 0.0 else box.low


@pytest.mark.parametrize("text, unit, params", [
    ("normal:0:0.1rf", "rf", (0.0, 0.1)), ("uniform:-1:2sd", "sd", (-1.0, 2.0)),
    ("triangular:0:1:3RF", "rf", (0.0, 1.0, 3.0)), ("normal:0.5:2", "outcome", (0.5, 2.0))])
def test_parse_reads_the_unit_suffix(text, unit, params):
    law = parse_prior(text)
    assert (law.unit, law.params) == (unit, params)


@pytest.mark.parametrize("text", ["normal:0:0.1xy", "normal:0:rf", "normal:0:-1rf"])
def test_bad_laws_are_refused(text):
    with pytest.raises(InputError, match="--prior"):
        parse_prior(text)


def test_negative_factor_reverses_the_ends():
    law = parse_prior("uniform:0.1:0.3rf").in_outcome_units(-2.0)
    assert law.params == pytest.approx((-0.6, -0.2)) and law.unit == "outcome"
    with pytest.raises(InputError, match="no scale"):
        parse_prior("normal:0:1rf").in_outcome_units(0.0)


@pytest.mark.parametrize("given, outcome", [
    ("normal:0:0.1rf", lambda rf: f"normal:0:{0.1 * abs(rf)!r}"),
    ("normal:0.05:0.1rf", lambda rf: f"normal:{0.05 * rf!r}:{0.1 * abs(rf)!r}"),
    ("uniform:-0.2:0.1rf", lambda rf: "uniform:" + ":".join(repr(v) for v in
                                                            sorted((-0.2 * rf, 0.1 * rf))))])
def test_rf_law_equals_the_same_law_in_outcome_units(source, reduced_form, given, outcome):
    a = prior.prior_analysis(source, priors=[given])
    b = prior.prior_analysis(source, priors=[outcome(reduced_form)])
    assert a.interval.low == pytest.approx(b.interval.low, rel=1e-9)
    assert a.interval.high == pytest.approx(b.interval.high, rel=1e-9)
    assert a.center == pytest.approx(b.center, rel=1e-9)
    assert f"(given as {parse_prior(given).text()})" in a.priors[0]


def test_sd_law_uses_the_sd_scale(source):
    res = bounds.sweep(source, direct=["0:1sd"])
    box = res.direct_set[0]
    factor = box.high if box.low == 0.0 else box.low
    a = prior.prior_analysis(source, priors=["normal:0:0.05sd"])
    b = prior.prior_analysis(source, priors=[f"normal:0:{0.05 * abs(factor)!r}"])
    assert a.interval.low == pytest.approx(b.interval.low, rel=1e-9)


def test_published_rf_law_uses_the_printed_reduced_form():
    numbers = dict(estimate=0.75, se=0.25, first_stage=4.2, first_stage_se=0.6,
                   reduced_form=3.15, reduced_form_se=0.95, n=212, direct="-0.25:0.25rf")
    a = published.published_analysis(**numbers, prior="normal:0:0.1rf")
    b = published.published_analysis(**numbers, prior=f"normal:0:{0.1 * 3.15!r}")
    assert a.prior.interval.low == pytest.approx(b.prior.interval.low, rel=1e-12)
    assert "given as normal:0:0.1rf" in a.prior.law
    with pytest.raises(InputError, match="'sd' unit"):
        published.published_analysis(**numbers, prior="normal:0:0.1sd")


def test_cli_accepts_a_prior_in_rf_units():
    out = CliRunner().invoke(app, [
        "prior", str(ROOT / "examples" / "irrigation.csv"), "--outcome", "maize_yield",
        "--treatment", "irrigation_hours", "--instrument", "height_m", "--control", "plot_ha",
        "--control", "soil", "--cluster", "village", "--prior", "normal:0:0.1rf", "--json"])
    assert out.exit_code == 0, out.output
    assert "given as normal:0:0.1rf" in out.stdout
