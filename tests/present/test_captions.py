"""Figure captions in reports, each analysis's own caution, and the LaTeX caution paragraphs.

Common practice, no source: a caption says what a figure shows (never a file path) and names
the quantities on it; a caution speaks of its own analysis's assumption.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import pytest

from sensiv.analyses import outputs, registry
from sensiv.data import Spec
from sensiv.estimation import iv
from sensiv.partial_id import correlation_results, discrete_results
from sensiv.partial_id.correlation import correlation_bounds
from sensiv.present import captions, table_rows, tables
from sensiv.sensitivity import bounds, calibrate, prior, published

EXAMPLE = Path(__file__).resolve().parents[2] / "examples" / "irrigation.csv"
SPEC = Spec("maize_yield", ["irrigation_hours"], ["height_m"], controls=["plot_ha", "soil"],
            cluster="village")


@pytest.fixture(scope="module")
def results():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return {
            "fit": iv.fit(EXAMPLE, SPEC),
            "sweep": bounds.sweep(EXAMPLE, SPEC, direct=["-0.005:0.005"], points=11),
            "prior": prior.prior_analysis(EXAMPLE, SPEC, priors=["normal:0:0.003"]),
            "corrbound": correlation_bounds(EXAMPLE, SPEC, max_ratio=0.1, reps=10, seed=1,
                                            points=5, progress=False),
            "calibrate": calibrate.calibrate(EXAMPLE, SPEC),
            "published": published.published_analysis(
                estimate=0.75, se=0.25, first_stage=4.2, first_stage_se=0.6,
                reduced_form=3.15, reduced_form_se=0.95, n=212, direct=["-0.25:0.25rf"]),
        }


def test_every_figure_has_a_caption_that_says_what_it_shows(results):
    seen = set()
    for res in results.values():
        kind = registry.entry_for(res)
        drawn = kind.figures(res, None)
        assert drawn, kind.name
        for name in drawn:
            text = captions.figure_caption(kind.name, name, res)
            assert "figures/" not in text and ".png" not in text
            # a known figure never gets the generic fallback sentence
            assert not text.startswith(f"The {name} figure of"), (kind.name, name)
            if kind.name not in ("published", "calibrate"):
                assert "irrigation_hours" in text, (kind.name, name)
            seen.add(text)
    assert len(seen) == sum(len(registry.entry_for(r).figures(r, None))
                            for r in results.values())  # no caption reused


def test_sweep_caption_names_the_instrument_and_the_threshold(results):
    text = captions.figure_caption("sweep", "curve", results["sweep"])
    assert "height_m" in text and "breakdown" in text and "θ = 0" in text
    assert "printed numbers" in captions.figure_caption("published", "curve",
                                                        results["published"])


def test_unknown_figure_gets_a_sentence_not_a_path(results):
    text = captions.figure_caption("sweep", "novel", results["sweep"])
    assert text == "The novel figure of the sweep analysis."


def test_each_analysis_words_its_own_caution(results):
    cautions = {
        "fit": {r.caution for r in table_rows.fit_rows(results["fit"])},
        "sweep": {r.caution for r in table_rows.sweep_rows(results["sweep"])},
        "prior": {r.caution for r in table_rows.prior_rows(results["prior"])},
        "corrbound": {r.caution for r in table_rows.corrbound_rows(results["corrbound"])},
        "calibrate": {r.caution for r in table_rows.calibrate_rows(results["calibrate"])},
        "published": {r.caution for r in table_rows.published_rows(results["published"])},
    }
    assert all(len(c) == 1 for c in cautions.values()), cautions
    flat = {k: next(iter(c)) for k, c in cautions.items()}
    assert len(set(flat.values())) == len(flat)  # no caution reused by another analysis
    assert flat["prior"] == prior.CAUTION and "prior" in flat["prior"]
    assert flat["published"] == published.CAUTION and "printed" in flat["published"]
    assert flat["calibrate"] == calibrate.CAUTION
    assert flat["corrbound"] == correlation_results.CAUTION
    assert discrete_results.CAUTION not in flat.values()
    assert all("prove" in c for c in flat.values())
    assert results["prior"].to_dict()["caution"] == prior.CAUTION
    assert results["published"].to_dict()["caution"] == published.CAUTION


def test_latex_gives_each_caution_its_own_paragraph(results):
    items = [results[k] for k in ("fit", "sweep", "prior", "corrbound")]
    table = outputs.results_table(items)
    latex = tables.table_latex(table)
    paragraphs = [line for line in latex.splitlines() if line.startswith(r"{\footnotesize")]
    assert len(paragraphs) == len(table.cautions) == 4
    assert all(line.endswith(r"\par}") and line.count("Caution:") == 1 for line in paragraphs)
