"""Plain-text output for the terminal: the results table keeps its sentences flush left, and
the per-instrument crossings name a side with no crossing in words.

Source: common practice, no source (numbers flush right, text flush left, no trailing blanks).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from sensiv.analyses import outputs
from sensiv.data import Spec
from sensiv.estimation import iv
from sensiv.present import text
from sensiv.present.text_units import crossing_lines
from sensiv.sensitivity import bounds


def design(n=400, seed=5):
    rng = np.random.default_rng(seed)
    z = rng.normal(size=n)
    v = rng.normal(size=n)
    x = 0.8 * z + v
    y = 0.5 * x + 0.6 * v + rng.normal(size=n)
    return pd.DataFrame({"y": y, "x": x, "z": z}), Spec("y", ["x"], ["z"], [])


def test_results_table_sentences_are_flush_left():
    frame, spec = design()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        found = [iv.fit(frame, spec), bounds.sweep(frame, spec, direct=["-0.2:0.2"])]
    lines = text.text_table(outputs.results_table(found)).splitlines()
    header, rule, body = lines[0], lines[1], lines[2:]
    start = header.index("Breakdown")
    assert all(line == line.rstrip() for line in lines)
    assert len(rule) == max(len(line) for line in lines)
    sweep_row = next(line for line in body if line.startswith("direct-effect sweep"))
    assert sweep_row[start:].startswith("direct effect up to ")     # flush left
    fit_row = next(line for line in body if line.startswith("2SLS"))
    assert fit_row[start:] == "—"
    # the numbers stay flush right under their headings
    assert all(line[start - 3] == "]" for line in body)


def test_crossings_name_the_side_without_one():
    one_side = bounds.Breakdown(0.0, 1.5, (None,), (0.052,), "β > 0")
    assert crossing_lines(["z"], one_side) == [
        "  z alone: an end of the interval crosses 0 at a direct effect of 0.052 (nearest "
        "above zero); no negative direct effect does"]
    both = bounds.Breakdown(0.0, 1.5, (-0.03,), (0.052,), "β > 0")
    assert "of -0.03 (nearest below zero) or 0.052 (nearest above zero)" in \
        crossing_lines(["z"], both)[0]
    neither = bounds.Breakdown(0.0, 0.0, (None,), (None,), "none")
    assert crossing_lines(["z"], neither) == [
        "  z alone: no direct effect makes a conclusion about 0 appear"]
    never = bounds.Breakdown(0.0, 2.0, (None,), (None,), "β > 0")
    assert crossing_lines(["z"], never) == [
        "  z alone: no direct effect makes an end of the interval cross 0"]
    below_only = bounds.Breakdown(0.0, 0.0, (-0.2,), (None,), "none")
    assert crossing_lines(["z"], below_only)[0].endswith(
        "at a direct effect of -0.2 (nearest below zero), where the interval stops containing "
        "it; no positive direct effect does")
