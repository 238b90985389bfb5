"""The notebook renderers: HTML fragments escape their text, curves keep unbounded ends as
±inf and empty sets as NaN (common practice, no source)."""

from __future__ import annotations

import math

from sensiv.core.results import Interval
from sensiv.partial_id.correlation_results import CurvePoint
from sensiv.present.notebook import curve_frame, table_html, text_html
from sensiv.present.tables import Table, TableRow


def row(assumption: str) -> TableRow:
    return TableRow(analysis="a<b", assumption=assumption, estimate=1.0, se=0.5, bounds=None,
                    interval=(Interval(-math.inf, 2.0),), confidence_level=0.95,
                    breakdown=None, breakdown_text="—", n=10, covariance="robust",
                    caution="Caution: <mind> the range")


def test_table_html_escapes_and_spells_infinity():
    page = table_html(Table("T & U", (row("x < 1"),), (("a<b", ("x < 1",)),)))
    assert "T &amp; U" in page and "x &lt; 1" in page and "a&lt;b" in page
    assert "<mind>" not in page and "&lt;mind&gt;" in page
    assert "−∞" in page
    assert text_html("<x>") == '<div class="sensiv-result"><pre>&lt;x&gt;</pre></div>'


def test_points_give_hulls_with_inf_and_nan():
    frame = curve_frame([CurvePoint(0.0, (Interval(1.0, 2.0),)),
                         CurvePoint(0.5, (Interval(-math.inf, 0.0), Interval(1.0, math.inf))),
                         CurvePoint(1.0, ())])
    assert frame["max_ratio"].tolist() == [0.0, 0.5, 1.0]
    assert frame["lower"].tolist()[:2] == [1.0, -math.inf]
    assert frame["upper"].tolist()[:2] == [2.0, math.inf]
    assert math.isnan(frame["lower"].iloc[2]) and math.isnan(frame["upper"].iloc[2])
