"""Prior laws of the direct effect: parsing ``--prior`` options and reading ``--prior-file``.

One law per instrument (:class:`Prior`: normal, uniform or triangular, with its moments,
density and sampler), or a multivariate normal from a TOML/JSON file.
"""

from __future__ import annotations

import json
import math
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from sensiv.core.errors import InputError

PRIOR_KINDS = ("normal", "uniform", "triangular")
# Units a law may be written in, as for ``--direct``: outcome units (no suffix), a share of the
# instrument's reduced-form coefficient (``rf``) or outcome SDs per instrument SD (``sd``).
PRIOR_UNITS = ("rf", "sd")
PSD_TOL = 1e-12          # relative tolerance for negative eigenvalues of a prior covariance


@dataclass(frozen=True, slots=True)
class Prior:
    """Prior law of one instrument's direct effect.

    ``params`` are in ``unit``: ``"outcome"`` (outcome units), ``"rf"`` (a share of the
    instrument's reduced-form coefficient) or ``"sd"`` (outcome SDs per instrument SD);
    :meth:`in_outcome_units` converts a law to outcome units, which every interval uses.
    """

    kind: str
    params: tuple[float, ...]
    unit: str = "outcome"

    def mean(self) -> float:
        if self.kind == "normal":
            return self.params[0]
        return sum(self.params) / len(self.params)

    def variance(self) -> float:
        if self.kind == "normal":
            return self.params[1] ** 2
        if self.kind == "uniform":
            lo, hi = self.params
            return (hi - lo) ** 2 / 12.0
        a, c, b = self.params
        return (a * a + b * b + c * c - a * b - a * c - b * c) / 18.0

    def sample(self, rng: np.random.Generator, size: int) -> np.ndarray:
        if self.kind == "normal":
            return rng.normal(self.params[0], self.params[1], size)
        if self.kind == "uniform":
            return rng.uniform(self.params[0], self.params[1], size)
        a, c, b = self.params
        return rng.triangular(a, c, b, size)

    def density(self, g: np.ndarray | float) -> np.ndarray:
        g = np.asarray(g, float)
        if self.kind == "uniform":
            lo, hi = self.params
            return np.where((g >= lo) & (g <= hi), 1.0 / (hi - lo), 0.0)
        a, c, b = self.params
        up = np.where(c > a, 2 * (g - a) / ((b - a) * max(c - a, 1e-300)), 0.0)
        down = np.where(b > c, 2 * (b - g) / ((b - a) * max(b - c, 1e-300)), 0.0)
        return np.where((g >= a) & (g <= b), np.where(g <= c, up, down), 0.0)

    def text(self) -> str:
        suffix = "" if self.unit == "outcome" else self.unit
        return f"{self.kind}:" + ":".join(f"{p:g}" for p in self.params) + suffix

    def in_outcome_units(self, factor: float) -> Prior:
        """The same law in outcome units, given the factor of its unit (the reduced-form
        coefficient for ``rf``, SD(outcome)/SD(instrument) for ``sd``).

        A location-scale change: a normal law's mean is multiplied by ``factor`` and its SD by
        ``|factor|``; the ends (and mode) of a uniform or triangular law are multiplied by
        ``factor`` and re-ordered when it is negative.

        Examples
        --------
        >>> parse_prior("normal:0.1:0.2rf").in_outcome_units(-2.0)
        Prior(kind='normal', params=(-0.2, 0.4), unit='outcome')
        >>> parse_prior("triangular:0:0.1:0.3rf").in_outcome_units(-10.0).params
        (-3.0, -1.0, 0.0)
        """
        if self.unit == "outcome":
            return self
        if not (math.isfinite(factor) and factor != 0.0):
            raise InputError(f"--prior '{self.text()}': the unit '{self.unit}' has no scale here "
                             f"(its factor is {factor:g}); state the law in outcome units")
        if self.kind == "normal":
            params = (self.params[0] * factor + 0.0, self.params[1] * abs(factor))
        else:
            scaled = tuple(p * factor + 0.0 for p in self.params)  # + 0.0: no -0
            params = scaled if factor > 0 else tuple(reversed(scaled))
        return Prior(self.kind, params)


def law_text(law: Prior, given: Prior) -> str:
    """How a law reads in the output: ``law`` (outcome units) alone when it was given in
    outcome units, else with the law as given, ``"normal:0:0.00462 (given as normal:0:0.1rf)"``."""
    return law.text() if given.unit == "outcome" else f"{law.text()} (given as {given.text()})"


def parse_prior(text: str) -> Prior:
    """Parse ``normal:MEAN:SD``, ``uniform:LOW:HIGH`` or ``triangular:LOW:MODE:HIGH``, in
    outcome units or, with the suffix ``rf`` or ``sd`` as for ``--direct``, as a share of the
    reduced form or in SD units.

    Examples
    --------
    >>> parse_prior("normal:0:0.01")
    Prior(kind='normal', params=(0.0, 0.01), unit='outcome')
    >>> parse_prior("normal:0:0.1rf")
    Prior(kind='normal', params=(0.0, 0.1), unit='rf')
    """
    body, unit = text.strip(), "outcome"
    for suffix in PRIOR_UNITS:
        if body.lower().endswith(suffix):
            body, unit = body[:-len(suffix)], suffix
            break
    kind, _, rest = body.partition(":")
    if kind not in PRIOR_KINDS:
        raise InputError(f"--prior '{text}': unknown law '{kind}'; use normal:MEAN:SD, "
                         "uniform:LOW:HIGH or triangular:LOW:MODE:HIGH")
    try:
        params = tuple(float(p) for p in rest.split(":")) if rest else ()
    except ValueError as exc:
        raise InputError(f"--prior '{text}': parameters must be numbers, with an optional unit "
                         "suffix rf or sd on the last one (e.g. normal:0:0.1rf)") from exc
    expected = {"normal": 2, "uniform": 2, "triangular": 3}[kind]
    if len(params) != expected or not all(math.isfinite(p) for p in params):
        raise InputError(f"--prior '{text}': {kind} takes {expected} finite numbers")
    if kind == "normal" and not params[1] > 0:
        raise InputError(f"--prior '{text}': the SD must be positive (got {params[1]:g}); for a "
                         "known direct effect use --direct VALUE:VALUE with `sensiv sweep`")
    if kind == "uniform" and not params[0] < params[1]:
        raise InputError(f"--prior '{text}': LOW must be below HIGH")
    if kind == "triangular" and not (params[0] <= params[1] <= params[2]
                                     and params[0] < params[2]):
        raise InputError(f"--prior '{text}': need LOW <= MODE <= HIGH with LOW < HIGH")
    return Prior(kind, params, unit)


def read_prior_file(path, instruments: Sequence[str]) -> tuple[np.ndarray, np.ndarray]:
    """Mean vector and covariance of a multivariate normal prior from TOML or JSON.

    The file holds ``mean`` (one number per instrument) and ``cov`` (a square matrix), e.g. in
    TOML: ``mean = [0.0, 0.0]`` and ``cov = [[1e-4, 0.0], [0.0, 4e-4]]``.
    """
    p = Path(path)
    if not p.is_file():
        raise InputError(f"prior file '{path}' does not exist; check the path")
    try:
        if p.suffix.lower() == ".toml":
            import tomllib

            content = tomllib.loads(p.read_text(encoding="utf-8"))
        else:
            content = json.loads(p.read_text(encoding="utf-8"))
    except (ValueError, UnicodeDecodeError) as exc:
        raise InputError(f"prior file '{path}' could not be parsed: {exc}") from exc
    if not isinstance(content, dict) or "mean" not in content or "cov" not in content:
        raise InputError(f"prior file '{path}' needs keys 'mean' (one value per instrument) and "
                         "'cov' (a square matrix)")
    k = len(instruments)
    try:
        mean = np.asarray(content["mean"], float).ravel()
        cov = np.atleast_2d(np.asarray(content["cov"], float))
    except (TypeError, ValueError) as exc:
        raise InputError(f"prior file '{path}': 'mean' and 'cov' must be numbers") from exc
    if mean.size != k or cov.shape != (k, k):
        raise InputError(f"prior file '{path}': need a mean of length {k} and a {k}x{k} "
                         f"covariance for instruments {', '.join(instruments)}")
    if not (np.all(np.isfinite(mean)) and np.all(np.isfinite(cov))):
        raise InputError(f"prior file '{path}': values must be finite")
    if not np.allclose(cov, cov.T, rtol=1e-10, atol=0):
        raise InputError(f"prior file '{path}': the covariance is not symmetric")
    eig = np.linalg.eigvalsh(cov)
    if eig.min() < -PSD_TOL * max(1.0, abs(eig).max()):
        raise InputError(f"prior file '{path}': the covariance is not positive semidefinite "
                         f"(smallest eigenvalue {eig.min():.3g})")
    return mean, cov
