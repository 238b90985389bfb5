"""A sweep with the leave-one-out yardsticks of the same data (``sweep --calibrate`` and a
recipe study with both a sweep and a calibration): the calibration is run, the breakdown set
against it (``sensiv.sensitivity.against_yardsticks``) and shown in one sentence."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from sensiv.present import figures, text_against
from sensiv.present.text_calibrate import calibration_markdown
from sensiv.present.writer import to_json
from sensiv.sensitivity import calibrate
from sensiv.sensitivity.against_yardsticks import YardstickComparison, compare


@dataclass(frozen=True, slots=True)
class SweepWithYardsticks:
    """A sweep, the calibration of the same data and the comparison of the two."""

    sweep: Any
    calibration: calibrate.Calibration
    comparison: YardstickComparison

    @property
    def sentence(self) -> str:
        return text_against.against_sentence(self.comparison)

    @property
    def text(self) -> str:
        return text_against.combined_text(str(self.sweep), str(self.calibration),
                                          self.comparison)

    def to_dict(self) -> dict:
        """The sweep's JSON with ``calibration`` and ``against_yardsticks`` (the comparison
        and its ``sentence``) added."""
        against = self.comparison.to_dict() | {"sentence": self.sentence}
        return self.sweep.to_dict() | {"calibration": self.calibration.to_dict(),
                                       "against_yardsticks": against}

    @property
    def files(self) -> dict[str, str]:
        """``calibrate.json``, ``calibrate.md`` and ``against_yardsticks.md`` for ``--out``."""
        return {"calibrate.json": to_json(self.calibration.to_dict()),
                "calibrate.md": calibration_markdown(self.calibration),
                "against_yardsticks.md": text_against.combined_markdown(self.comparison)}


def with_yardsticks(sweep, source, **common) -> SweepWithYardsticks:
    """Run the calibration on ``source`` (the sweep's data) with the common options (``se``,
    ``confidence_level``, ``small``) and set the sweep's breakdown against it."""
    calibration = calibrate.calibrate(source, **common)
    return SweepWithYardsticks(sweep, calibration, compare(sweep, calibration))


def marked_curve(sweep, comparison, formats=("png",), note: str | None = None
                 ) -> dict[str, bytes]:
    """``sweep-curve.{format}`` with the yardsticks drawn as marks (replaces the plain curve)."""
    fig = figures.sensitivity_curve(sweep, note=note, yardsticks=comparison)
    return {f"sweep-curve.{fmt}": data for fmt, data in figures.save_figure(fig, formats).items()}
