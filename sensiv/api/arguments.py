"""The arguments of the Python API, normalised once: keyword roles into a
:class:`~sensiv.data.Spec`, a pandas or polars frame (or a path) into data the readers take,
``"LOW:HIGH"`` strings, ``(low, high)`` tuples and lists of either into direct-effect ranges,
prior laws as strings or lists, and the layers' messages into API terms.

The layers below speak the command line's language (``--direct``); :func:`api_terms` rewrites
an :class:`~sensiv.core.errors.InputError` raised inside a call so that it names the keyword
argument (``direct=``) instead.

Examples
--------
>>> direct_ranges("-0.02:0.02")
[RangeSpec(low=-0.02, high=0.02, unit='')]
>>> direct_ranges([(-0.01, 0.01), "-0.1:0.1rf"])
[RangeSpec(low=-0.01, high=0.01, unit=''), RangeSpec(low=-0.1, high=0.1, unit='rf')]
>>> option_to_keyword("--direct-polytope 'x.csv' is missing")
"polytope= 'x.csv' is missing"
"""

from __future__ import annotations

import contextlib
import math
import re
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from sensiv.core.errors import InputError
from sensiv.data import Spec
from sensiv.sensitivity.direct_sets import RangeSpec, parse_range
from sensiv.sensitivity.prior_laws import Prior, parse_prior

ROLES = ("outcome", "treatment", "instruments", "controls", "cluster", "weight", "where",
         "categorical", "absorb", "constant")
"""The keyword roles every data-taking function of the API accepts (the CLI's options)."""

# The command line's option -> the API's keyword, where the spelling differs.
KEYWORDS = {"--direct-polytope": "polytope", "--instrument": "instruments",
            "--control": "controls", "--group": "groups", "--prior-file": "prior_file"}
_OPTION = re.compile(r"--(?:no-)?([a-z][a-z0-9-]*)")


def option_to_keyword(message: str) -> str:
    """``message`` with every ``--option`` written as the API keyword ``option=``."""
    def keyword(match: re.Match) -> str:
        name = KEYWORDS.get(match.group(0), match.group(1).replace("-", "_"))
        return f"{name}="
    return _OPTION.sub(keyword, message)


@contextlib.contextmanager
def api_terms() -> Iterator[None]:
    """Re-raise an :class:`InputError` from the layers with its options in API terms."""
    try:
        yield
    except InputError as exc:
        raise InputError(option_to_keyword(str(exc))) from exc


def names(value: Any, keyword: str) -> tuple[str, ...]:
    """A string or a list of strings as a tuple of names (``None`` is empty)."""
    if value is None:
        return ()
    if isinstance(value, str):
        return (value,)
    try:
        items = tuple(value)
    except TypeError as exc:
        raise InputError(f"{keyword}= must be a column name or a list of names; got "
                         f"{value!r}: pass e.g. {keyword}=['a', 'b']") from exc
    for item in items:
        if not isinstance(item, str) or not item:
            raise InputError(f"{keyword}= must hold column names (non-empty strings); got "
                             f"{item!r} in {value!r}")
    return items


def one_name(value: Any, keyword: str) -> str | None:
    """A single column name (or ``None``)."""
    if value is None or (isinstance(value, str) and value):
        return value
    raise InputError(f"{keyword}= takes one column name; got {value!r}")


def cluster_names(value: Any) -> str | list[str] | None:
    """``cluster=``: one column name, or a list of two for two-way clustering."""
    if value is None or isinstance(value, str):
        return one_name(value, "cluster")
    found = names(value, "cluster")
    if len(found) > 2:
        raise InputError(f"cluster= takes one or two column names; got {len(found)}")
    return found[0] if len(found) == 1 else list(found)


def spec_of_roles(roles: dict[str, Any]) -> Spec:
    """The :class:`Spec` of keyword roles; unknown keywords are refused by name."""
    unknown = sorted(set(roles) - set(ROLES))
    if unknown:
        raise InputError(f"unknown argument{'s' if len(unknown) > 1 else ''} "
                         f"{', '.join(unknown)}; the roles are {', '.join(ROLES)}")
    if not roles.get("outcome") or not roles.get("treatment") or not roles.get("instruments"):
        raise InputError("name the model's columns: outcome=, treatment= and instruments= "
                         "are required with a DataFrame or a path (or pass spec=, or a "
                         "fitted model instead of data)")
    constant = roles.get("constant", True)
    return Spec(outcome=one_name(roles["outcome"], "outcome"),
                treatments=names(roles["treatment"], "treatment"),
                instruments=names(roles["instruments"], "instruments"),
                controls=names(roles.get("controls"), "controls"),
                cluster=cluster_names(roles.get("cluster")),
                weight=one_name(roles.get("weight"), "weight"),
                where=roles.get("where"), categorical=names(roles.get("categorical"),
                                                            "categorical"),
                constant=constant, absorb=names(roles.get("absorb"), "absorb"))


def as_frame(data: Any) -> Any:
    """A polars (or any Arrow-backed) frame as pandas, by duck typing; anything else as is."""
    import pandas as pd

    if isinstance(data, pd.DataFrame) or isinstance(data, (str, Path)) or hasattr(data, "chunks"):
        return data
    if callable(getattr(data, "to_pandas", None)):
        frame = data.to_pandas()
        if isinstance(frame, pd.DataFrame):
            return frame
    raise InputError(f"data must be a pandas or polars DataFrame, a path to a CSV, Parquet or "
                     f".dta file, or a fitted IV model (linearmodels IV2SLS, pyfixest feols); "
                     f"got {type(data).__name__}")


def direct_ranges(direct: Any) -> list[RangeSpec] | None:
    """``direct=`` as one range per instrument: ``"LOW:HIGH[unit]"``, ``(low, high)``, a
    :class:`RangeSpec`, or a list of these (one per instrument)."""
    if direct is None:
        return None
    if isinstance(direct, (str, RangeSpec)) or _is_pair(direct):
        direct = [direct]
    try:
        items = list(direct)
    except TypeError as exc:
        raise InputError(f"direct={direct!r} is not a range; write direct='-0.01:0.01', "
                         "direct=(-0.01, 0.01) or a list with one per instrument") from exc
    return [_one_range(item) for item in items]


def _is_pair(value: Any) -> bool:
    return (isinstance(value, tuple) and len(value) == 2
            and all(_is_number(v) for v in value))


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _one_range(item: Any) -> RangeSpec:
    if isinstance(item, RangeSpec):
        return item
    if isinstance(item, str):
        return parse_range(item)
    if _is_pair(item):
        low, high = (float(v) for v in item)
        if not (math.isfinite(low) and math.isfinite(high)):
            raise InputError(f"direct={item!r}: the range must be finite")
        return parse_range(f"{low!r}:{high!r}")
    raise InputError(f"direct= item {item!r} is not a range; give 'LOW:HIGH' (optionally "
                     "with the unit rf or sd, e.g. '-0.1:0.1rf') or a (low, high) tuple")


def prior_laws(prior: Any) -> list[Prior] | None:
    """``prior=`` as one law per instrument: ``"normal:0:0.01"``, a :class:`Prior`, or a list."""
    if prior is None:
        return None
    if isinstance(prior, (str, Prior)):
        prior = [prior]
    try:
        items = list(prior)
    except TypeError as exc:
        raise InputError(f"prior={prior!r} is not a law; write e.g. prior='normal:0:0.01' "
                         "or a list with one law per instrument") from exc
    laws = []
    for item in items:
        if not isinstance(item, (str, Prior)):
            raise InputError(f"prior= item {item!r} is not a law; write e.g. "
                             "'normal:0:0.01', 'uniform:-0.02:0.02' or 'triangular:-1:0:1'")
        laws.append(parse_prior(item) if isinstance(item, str) else item)
    return laws


def level_of(level: Any) -> float:
    """``level=`` as a confidence level in (0, 1)."""
    if not _is_number(level) or not 0 < level < 1:
        raise InputError(f"level={level!r} is not a confidence level; give a number in "
                         "(0, 1), e.g. level=0.95")
    return float(level)
