"""The validated :class:`Spec` of an IV model's column roles, and the checks of those roles
against the columns a data set actually has.

A :class:`Spec` is checked when it is built (names, counts, repeats); :func:`check_columns`
checks it against a data set's column names and suggests close matches for a typo.

Examples
--------
>>> spec = Spec("y", ["x"], ["z"], weight="w")
>>> roles(spec)
[('outcome', 'y'), ('treatment', 'x'), ('instrument', 'z'), ('weight', 'w')]
>>> used_columns(spec)
['y', 'x', 'z', 'w']
"""

from __future__ import annotations

import difflib
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from sensiv.core.errors import InputError
from sensiv.data.where import Node, filter_columns, parse_filter

MAX_LISTED_COLUMNS = 25
"""Available columns listed in an unknown-column message before the list is cut."""

MAX_SUGGESTIONS = 3
SUGGESTION_CUTOFF = 0.6  # difflib similarity below which a name is not suggested


def _names(value: Any, role: str) -> tuple[str, ...]:
    if isinstance(value, str):
        value = (value,)
    try:
        names = tuple(value)
    except TypeError as exc:
        raise InputError(
            f"{role} columns must be a list of names; got {value!r}: pass e.g. ['{role}_a']"
        ) from exc
    for name in names:
        _check_name(name, role)
    return names


def _check_name(name: Any, role: str) -> None:
    if not isinstance(name, str) or not name:
        raise InputError(f"{role} column name must be a non-empty string; got {name!r}")


DEFAULT_ABSORB_TOLERANCE = 1e-10
"""Relative change of a demeaned column below which alternating projections stop."""


@dataclass(frozen=True, slots=True)
class Spec:
    """Column roles of an IV model.

    Parameters
    ----------
    outcome : str
        Outcome column ``y``.
    treatments : sequence of str
        Endogenous treatment columns ``X`` (at least one).
    instruments : sequence of str
        Excluded instruments ``Z`` (at least as many as treatments).
    controls : sequence of str, default ()
        Exogenous controls ``W``; text columns become indicator columns.
    cluster : str, pair of str, or None
        Column of cluster labels for cluster-robust inference; two names (a list or tuple)
        ask for two-way clustering (Cameron, Gelbach & Miller 2011).  One name is kept as a
        string, two as a tuple; :func:`cluster_columns` gives the names as a tuple always.
    weight : str or None
        Column of positive analytic weights.
    constant : bool, default True
        Whether the model has an intercept (added analytically, never as a column).
    where : str or None
        Row filter in sensiv's small expression language (see :mod:`sensiv.data.where`),
        e.g. ``"age >= 18 and region in ['north', 'east']"``; parsed (and its syntax
        checked) when the Spec is built.  Its columns are read but play no role.
    categorical : sequence of str, default ()
        Numeric (integer-coded) controls to expand into indicators like text controls;
        a name not already among ``controls`` is added to them.
    absorb : sequence of str, default ()
        Categorical columns (text or integer codes) whose fixed effects are partialled out
        of every other column (see :mod:`sensiv.estimation.absorb`) instead of entering as
        indicator columns.
    absorb_tolerance : float, default 1e-10
        Relative tolerance at which the alternating projections of several absorbed fixed
        effects stop (one fixed effect is absorbed exactly and ignores it).

    Raises
    ------
    InputError
        No treatment or instrument, fewer instruments than treatments, or a column named
        more than once.
    """

    outcome: str
    treatments: tuple[str, ...]
    instruments: tuple[str, ...]
    controls: tuple[str, ...] = ()
    cluster: str | tuple[str, ...] | None = None
    weight: str | None = None
    constant: bool = True
    where: str | None = None
    categorical: tuple[str, ...] = ()
    absorb: tuple[str, ...] = ()
    absorb_tolerance: float = DEFAULT_ABSORB_TOLERANCE

    def __post_init__(self) -> None:
        _check_name(self.outcome, "outcome")
        tolerance = self.absorb_tolerance
        if (isinstance(tolerance, bool) or not isinstance(tolerance, (int, float))
                or not 0.0 < tolerance < 1.0):
            raise InputError(f"absorb tolerance {tolerance!r} (--absorb-tolerance, recipe key "
                             "absorb_tolerance) must be a number in (0, 1), e.g. 1e-10")
        object.__setattr__(self, "absorb_tolerance", float(tolerance))
        for role in ("treatments", "instruments", "controls", "categorical", "absorb"):
            object.__setattr__(self, role, _names(getattr(self, role), role.rstrip("s")))
        object.__setattr__(self, "categorical", tuple(dict.fromkeys(self.categorical)))
        extra = tuple(name for name in self.categorical if name not in self.controls)
        object.__setattr__(self, "controls", self.controls + extra)
        if self.where is not None:
            parse_filter(self.where)  # a syntax error is the caller's mistake, raised now
        object.__setattr__(self, "cluster", _cluster_value(self.cluster))
        if self.weight is not None:
            _check_name(self.weight, "weight")
        if not isinstance(self.constant, (bool, np.bool_)):
            raise InputError(f"constant must be True or False; got {self.constant!r}")
        object.__setattr__(self, "constant", bool(self.constant))
        if not self.treatments:
            raise InputError("no treatment given: name at least one treatment column")
        if not self.instruments:
            raise InputError("no instrument given: name at least one instrument column")
        k_x, k_z = len(self.treatments), len(self.instruments)
        if k_z < k_x:
            raise InputError(
                f"{k_x} treatments need at least {k_x} instruments; got {k_z}: "
                "add an instrument or drop a treatment"
            )
        seen: dict[str, str] = {}
        for role, name in roles(self):
            if {seen.get(name), role} == {"absorbed fixed effect", "cluster"}:
                continue  # clustering on an absorbed fixed effect is a common design
            if name in seen:
                where = f"twice as {role}" if seen[name] == role else (
                    f"both as {seen[name]} and as {role}")
                raise InputError(
                    f"column {name!r} is named {where}; a column can play only one role "
                    "and be listed once: remove the repeat"
                )
            seen[name] = role


def _cluster_value(value: Any) -> str | tuple[str, ...] | None:
    """One cluster name as a string, two as a tuple (two-way), none as ``None``."""
    if value is None or isinstance(value, str):
        if value is not None:
            _check_name(value, "cluster")
        return value
    names = _names(value, "cluster")
    if len(names) > 2 or len(set(names)) < len(names):
        raise InputError(f"cluster takes one column or two different columns (two-way "
                         f"clustering); got {list(names)!r}: give at most two distinct names")
    if not names:
        return None
    return names[0] if len(names) == 1 else names


def cluster_columns(spec: Spec) -> tuple[str, ...]:
    """The cluster columns of ``spec``: ``()``, one name, or two for two-way clustering."""
    if spec.cluster is None:
        return ()
    return (spec.cluster,) if isinstance(spec.cluster, str) else tuple(spec.cluster)


def cluster_label(spec_or_cluster: Any) -> str:
    """The cluster columns for messages: ``'village'`` or ``'village' and 'year'``."""
    value = getattr(spec_or_cluster, "cluster", spec_or_cluster)
    names = (value,) if isinstance(value, str) else tuple(value or ())
    return " and ".join(f"'{name}'" for name in names)


def roles(spec: Spec) -> list[tuple[str, str]]:
    """``(role, column)`` pairs for every used column, in a fixed order."""
    pairs = [("outcome", spec.outcome)]
    pairs += [("treatment", name) for name in spec.treatments]
    pairs += [("instrument", name) for name in spec.instruments]
    pairs += [("control", name) for name in spec.controls]
    pairs += [("absorbed fixed effect", name) for name in spec.absorb]
    pairs += [("cluster", name) for name in cluster_columns(spec)]
    pairs += [("weight", spec.weight)] if spec.weight is not None else []
    return pairs


def used_columns(spec: Spec) -> list[str]:
    """Every column the model uses, once each, in the order of :func:`roles`."""
    return list(dict.fromkeys(name for _, name in roles(spec)))


def row_filter(spec: Spec) -> Node | None:
    """The parsed row filter of ``spec`` (``None`` without one)."""
    return parse_filter(spec.where) if spec.where is not None else None


def filter_only_columns(spec: Spec) -> list[str]:
    """Columns read only by the row filter (not model roles)."""
    tree = row_filter(spec)
    used = set(used_columns(spec))
    return [name for name in filter_columns(tree) if name not in used] if tree else []


def read_columns(spec: Spec) -> list[str]:
    """Every column read from the data: the model's columns, then the filter's others."""
    return used_columns(spec) + filter_only_columns(spec)


def check_columns(spec: Spec, available: Sequence[Any], description: str) -> None:
    """Raise :class:`InputError` unless every role's column appears exactly once in ``available``.

    A missing column is reported with up to :data:`MAX_SUGGESTIONS` close names and the list
    of available columns (cut after :data:`MAX_LISTED_COLUMNS`).
    """
    labels = [str(name) for name in available]
    problems = []
    checked = roles(spec) + [("row-filter", name) for name in filter_only_columns(spec)]
    for role, name in checked:
        count = sum(1 for label in available if label == name)
        if count > 1:
            raise InputError(
                f"{role} column {name!r} appears {count} times in {description}; "
                "rename the duplicates so that each column name is unique"
            )
        if count == 0:
            problems.append((role, name, _suggest(name, labels)))
    if not problems:
        return
    listed = ", ".join(repr(name) for name in labels[:MAX_LISTED_COLUMNS])
    if len(labels) > MAX_LISTED_COLUMNS:
        listed += f", ... ({len(labels) - MAX_LISTED_COLUMNS} more)"
    parts = []
    for role, name, close in problems:
        hint = f"; did you mean {' or '.join(map(repr, close))}?" if close else ""
        parts.append(f"{role} column {name!r} not found in {description}{hint}")
    message = "; ".join(parts)
    raise InputError(message + (" " if message.endswith("?") else "; ") + f"available: {listed}")


def _suggest(name: str, labels: list[str]) -> list[str]:
    same_case = [label for label in labels if label.lower() == name.lower()]
    close = difflib.get_close_matches(name, labels, n=MAX_SUGGESTIONS, cutoff=SUGGESTION_CUTOFF)
    return list(dict.fromkeys(same_case + close))[:MAX_SUGGESTIONS]
