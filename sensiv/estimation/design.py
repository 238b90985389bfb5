"""Design maps of a 2SLS model and the checks on them.

Every column group (outcome, treatments, instruments, controls) is a linear map from the
augmented centred row ``d̃ = [1, d − μ]`` of :class:`sensiv.estimation.moments.Moments`.  With a
constant, slopes are solved in centred coordinates and the intercept recovered by an exact
reparameterisation ``θ = T θ*``, so a column whose mean dwarfs its spread does not spoil the
solve.  :func:`check_design` rejects constant and collinear columns with a message that names
the column and its role.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from sensiv.core.errors import InputError
from sensiv.core.results import with_article
from sensiv.estimation import linalg
from sensiv.estimation.moments import Moments

CONSTANT = "const"
# A column whose standard deviation is below this fraction of its root mean square is constant
# up to rounding (a mean of 1e6 with unit spread is still well within double precision).
CONSTANT_RELATIVE_SD = 1e-12


@dataclass(frozen=True, slots=True)
class Design:
    """Linear maps from the augmented centred row ``[1, d − μ]`` to each column group.

    ``controls`` holds the exogenous regressors in solving order: the constant first (when
    present), then the named controls.  ``transform`` maps parameters solved in centred
    coordinates to the raw parameters, ordered ``[controls..., treatments...]``.
    """

    outcome: str
    treatments: tuple[str, ...]
    instruments: tuple[str, ...]
    control_names: tuple[str, ...]
    y: np.ndarray
    x: np.ndarray
    z: np.ndarray
    w: np.ndarray
    transform: np.ndarray

    @property
    def regressors(self) -> np.ndarray:
        return np.hstack([self.w, self.x])

    @property
    def instrument_set(self) -> np.ndarray:
        return np.hstack([self.w, self.z])

    @property
    def regressor_names(self) -> tuple[str, ...]:
        return (*self.control_names, *self.treatments)


def build_design(moments: Moments, outcome: str, treatments: Sequence[str],
                 instruments: Sequence[str], controls: Sequence[str], constant: bool) -> Design:
    """Selection maps for the roles, with the intercept reparameterisation when ``constant``."""
    p = len(moments.columns)
    index = {name: j for j, name in enumerate(moments.columns)}

    def raw(name: str) -> np.ndarray:
        col = np.zeros(p + 1)
        col[0] = moments.mean[index[name]]
        col[1 + index[name]] = 1.0
        return col

    def centred(name: str) -> np.ndarray:
        col = np.zeros(p + 1)
        col[1 + index[name]] = 1.0
        return col

    pick = centred if constant else raw
    w_cols = [pick(c) for c in controls]
    names = list(controls)
    if constant:
        one = np.zeros(p + 1)
        one[0] = 1.0
        w_cols.insert(0, one)
        names.insert(0, CONSTANT)
    k_w = len(w_cols)
    w = np.column_stack(w_cols) if w_cols else np.zeros((p + 1, 0))
    x = np.column_stack([pick(t) for t in treatments])
    z = np.column_stack([pick(i) for i in instruments])
    k = k_w + len(treatments)
    transform = np.eye(k)
    if constant:
        means = np.array([moments.mean[index[n]] for n in (*controls, *treatments)])
        transform[0, 1:] = -means
    return Design(outcome, tuple(treatments), tuple(instruments), tuple(names), raw(outcome),
                  x, z, w, transform)


def constant_columns(moments: Moments) -> set[str]:
    """Columns whose spread is negligible next to their level (or exactly zero)."""
    var = np.diag(moments.comoment) / moments.weight_sum
    level = var + moments.mean**2
    return {name for name, v, m in zip(moments.columns, var, level)
            if not v > CONSTANT_RELATIVE_SD**2 * m}


def check_design(design: Design, weighted_gram: np.ndarray, moments: Moments) -> None:
    """Raise :class:`InputError` for constant or collinear outcome, regressors or instruments."""
    constant = constant_columns(moments)
    roles = [(design.outcome, "outcome"), *((t, "treatment") for t in design.treatments),
             *((i, "instrument") for i in design.instruments),
             *((c, "control") for c in design.control_names if c != CONSTANT)]
    for name, role in roles:
        if name in constant:
            raise InputError(f"{role} '{name}' is constant in the {moments.n} rows used; "
                             f"choose {with_article(role)} that varies")
    n_w = len(design.control_names)
    for maps, names, role in (
        (design.instrument_set, (*design.control_names, *design.instruments), "instrument"),
        (design.regressors, (*design.control_names, *design.treatments), "treatment"),
    ):
        gram = maps.T @ weighted_gram @ maps
        found = linalg.first_dependent_column(gram)
        if found is None:
            continue
        j, share = found
        name = names[j]
        if j < n_w:
            raise InputError(f"control '{name}' is collinear with the constant and the controls "
                             "listed before it; drop it (or pass --no-constant if it completes "
                             "a full set of indicators)")
        raise InputError(
            f"{role} '{name}' is collinear with the controls (and the {role}s before it): only "
            f"a share {share:.1e} of its variation is left after partialling them out; drop it "
            f"or choose another {role}")
