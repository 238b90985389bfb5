"""Figures drawn from result objects (nothing new is computed here).

Every figure function takes a result and an optional matplotlib ``Axes`` and returns the
``Figure``.  Without ``ax`` the figure is built at a journal's single-column width
(:data:`~sensiv.present.figures.style.WIDTH_IN` inches) with its own layout: the plot, a legend
row under it and a caption that states the assumption; with ``ax`` the figure is drawn into the
caller's axes, the legend goes inside them and the caption below them.  ``note`` adds a last
caption line (e.g. "Invented demo data").  No function shows a window, writes a file or
changes its input; matplotlib is imported inside the functions and never through ``pyplot``,
so importing this package imports no matplotlib and touches no display.

:func:`save_figure` turns a figure into PNG (300 dpi), PDF and SVG bytes that are identical
from run to run (no timestamps; fonts embedded as TrueType in PDF and as paths in SVG).

One module per figure kind, over a shared :mod:`~sensiv.present.figures.style`:

- :mod:`~sensiv.present.figures.curve` — :func:`sensitivity_curve`
- :mod:`~sensiv.present.figures.frontier` — :func:`breakdown_frontier`
  (both read a sweep or a published stress test through
  :mod:`~sensiv.present.figures.direct`)
- :mod:`~sensiv.present.figures.polytope` — :func:`polytope_figure` (a polytope sweep over
  two instruments: the set itself)
- :mod:`~sensiv.present.figures.prior_map` — :func:`prior_map`
- :mod:`~sensiv.present.figures.discrete` — :func:`discrete_curve`
- :mod:`~sensiv.present.figures.correlation` — :func:`correlation_curve`
- :mod:`~sensiv.present.figures.summary` — :func:`summary_intervals` over
  :class:`SummaryItem` rows, and one row builder per kind of result
- :mod:`~sensiv.present.figures.calibration` — :func:`calibration_yardsticks`

Axis units
----------
The direct-effect figures put on the x-axis the allowed direct effect ``x = t·e``: ``t`` is the
scale of the stated set Γ and ``e`` its end of largest magnitude (one instrument, outcome
units), or ``x = t`` itself with several instruments.  The top axis converts ``x`` to a share
of the reduced-form coefficient using ``direct_set_rf`` of the result.  The yardstick figure of
a calibration puts the implied direct effects in outcome units on the x-axis and their share of
the reduced form on the top axis.
"""

from sensiv.present.figures.calibration import calibration_yardsticks
from sensiv.present.figures.correlation import correlation_curve
from sensiv.present.figures.curve import sensitivity_curve
from sensiv.present.figures.discrete import discrete_curve
from sensiv.present.figures.frontier import breakdown_frontier
from sensiv.present.figures.polytope import polytope_figure
from sensiv.present.figures.prior_map import prior_map
from sensiv.present.figures.style import FORMATS, save_figure
from sensiv.present.figures.summary import (SummaryItem, correlation_items, discrete_items,
                                            distinct_rows, fit_items, prior_items,
                                            published_items, summary_intervals, sweep_items)

__all__ = ["FORMATS", "SummaryItem", "breakdown_frontier", "calibration_yardsticks",
           "correlation_curve", "correlation_items", "discrete_curve", "discrete_items",
           "distinct_rows",
           "fit_items", "polytope_figure", "prior_items", "prior_map", "published_items", "save_figure",
           "sensitivity_curve", "summary_intervals", "sweep_items"]
