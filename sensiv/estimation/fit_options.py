"""The inference options of a fit and the source it reads: the covariance types, their
checks, the default covariance, and a source from a path, a frame or a source (with the
absorbed fixed effects partialled out).  ``sensiv.estimation.iv`` re-exports these names."""

from __future__ import annotations

from typing import Literal

from sensiv.core.errors import InputError
from sensiv.data.readers import load
from sensiv.estimation.absorbed_source import absorb_source

SEType = Literal["classic", "robust", "cluster"]
SE_TYPES: tuple[str, ...] = ("classic", "robust", "cluster")


def check_options(se: str, cluster: str | None, confidence_level: float) -> None:
    """Validate the inference options (the caller's mistakes become :class:`InputError`)."""
    if se not in SE_TYPES:
        raise InputError(f"--se '{se}' is not a covariance type; choose one of "
                         f"{', '.join(SE_TYPES)}")
    if se == "cluster" and cluster is None:
        raise InputError("--se cluster needs a cluster variable: add --cluster COLUMN, or "
                         "choose --se robust")
    if not 0.0 < confidence_level < 1.0:
        raise InputError(f"--level {confidence_level} is outside (0, 1); give a confidence "
                         "level such as 0.95")


def as_source(data, spec=None, *, chunk_rows: int | None = None,
              absorb_tolerance: float | None = None):
    """A data-layer source from a source, a DataFrame or a path (with ``spec``), with the
    fixed effects of ``spec.absorb`` partialled out (to ``absorb_tolerance``, default 1e-10)."""
    source = data if hasattr(data, "chunks") else load(data, spec, chunk_rows=chunk_rows)
    if absorb_tolerance is None:
        return absorb_source(source)
    return absorb_source(source, tolerance=absorb_tolerance)


def default_se(spec) -> str:
    """``cluster`` when the spec names a cluster variable, else ``robust``."""
    return "cluster" if spec.cluster else "robust"
