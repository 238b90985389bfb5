"""The prior map's three regions: conclusion kept, threshold contained, conclusion reversed.

Sources: each cell's interval is the closed form of Conley, Hansen & Rossi (2012),
``β̂ − a·m ± c·√(V + (a·s)²)``, computed here by hand; the classification is common practice,
no source.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from sensiv.present import figures
from sensiv.present.figures.prior_map import region_names
from sensiv.sensitivity import prior
from sensiv.sensitivity.linear_core import Core


def hand_interval(core, m, s):
    a = float(core.slope[0])
    centre = core.estimate - a * m
    half = core.critical * math.sqrt(core.quad[0, 0] + (a * s) ** 2)
    return centre - half, centre + half


@pytest.mark.parametrize("estimate, slope", [(0.7, -2.0), (-0.7, 2.0), (0.7, 2.0)])
def test_regions_follow_the_closed_form_interval(estimate, slope):
    core = Core("x", ("z",), estimate, np.array([slope]), np.diag([0.01, 0.0]), 1.96)
    pm = prior.prior_map(core, np.array([0.0]), np.array([[0.2**2]]), 0.0, points=41)
    side = 1 if estimate > 0 else -1
    seen = set()
    for i in range(0, 41, 4):
        for j in range(0, 41, 4):
            lo, hi = hand_interval(core, pm.mean[j], pm.sd[i])
            same = lo > 0 if side > 0 else hi < 0          # on the side of 2SLS: kept
            other = hi < 0 if side > 0 else lo > 0         # wholly on the other: reversed
            want = 1 if same else -1 if other else 0
            assert pm.region[i, j] == want
            seen.add(want)
    assert seen == {-1, 0, 1}                      # the grid reaches all three regions
    assert np.array_equal(pm.region != 0, pm.excludes)
    doc = pm.to_dict()
    assert doc["region"] == pm.region.tolist()


def test_figure_draws_kept_and_reversed_regions_with_their_names():
    import matplotlib

    matplotlib.use("Agg")
    core = Core("x", ("z",), 0.7, np.array([-2.0]), np.diag([0.01, 0.0]), 1.96)
    pm = prior.prior_map(core, np.array([0.0]), np.array([[0.2**2]]), 0.0, points=41)

    class Result:                                  # the few facts the figure reads
        prior_map = pm
        confidence_level = 0.95
        instruments = ("z",)
        priors = ("normal:0:0.2",)
        focus = "x"
        se_type = "robust"
        n = 100
        method = "closed-form"

    fig = figures.prior_map(Result())
    gids = {a.get_gid() for ax in fig.axes for a in ax.get_children()}
    assert {"kept", "reversed", "boundary"} <= gids
    labels = [t.get_text() for legend in fig.legends for t in legend.get_texts()]
    labels += [t.get_text() for ax in fig.axes if ax.get_legend()
               for t in ax.get_legend().get_texts()]
    names = region_names("95%", "0", ">")
    assert names[1] == "kept: 95% interval > 0"
    assert names[-1] == "reversed: 95% interval < 0"
    assert all(name in labels for name in names.values()), labels
