"""A per-instrument table (one row per instrument, published associations) read into columns.

The user names the column of each role (``first_stage``, ``first_stage_se``, ``reduced_form``,
``reduced_form_se`` and optionally ``name``); nothing is assumed from any file layout.  A
missing column, an empty cell or a value that is not a number is refused with a message naming
the column, the option that named it and the row.  Statistics (zero first stage, SEs > 0) are
checked by :func:`sensiv.sensitivity.associations.check_associations`.

Examples
--------
>>> import pandas as pd
>>> frame = pd.DataFrame({"snp": ["a", "b"], "bx": [0.1, 0.2], "sx": [0.01, 0.02],
...                       "by": [0.05, 0.1], "sy": [0.02, 0.02]})
>>> table = read_per_instrument(frame, {"first_stage": "bx", "first_stage_se": "sx",
...                                     "reduced_form": "by", "reduced_form_se": "sy"}, "snp")
>>> table.names, table.columns["first_stage"].tolist()
(('a', 'b'), [0.1, 0.2])
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from sensiv.core.errors import InputError
from sensiv.data.readers import read_table

ROLES = ("first_stage", "first_stage_se", "reduced_form", "reduced_form_se")
"""The numeric roles of a per-instrument table."""

CLI_OPTIONS = {"first_stage": "--first-stage", "first_stage_se": "--first-stage-se",
               "reduced_form": "--reduced-form", "reduced_form_se": "--reduced-form-se",
               "name": "--name"}
"""The option that names each role's column on the command line."""


@dataclass(frozen=True, slots=True)
class PerInstrumentTable:
    """The roles' columns as float arrays, the instrument names and where they came from."""

    source: str
    names: tuple[str, ...] | None
    columns: Mapping[str, np.ndarray]


def _numbers(frame: Any, column: str, label: str, source: str) -> np.ndarray:
    import pandas as pd

    raw = frame[column]
    values = pd.to_numeric(raw, errors="coerce")
    empty = raw.isna().to_numpy()
    bad = np.flatnonzero(values.isna().to_numpy() & ~empty)
    if bad.size:
        row = int(bad[0])
        raise InputError(f"column '{column}' ({label}) of {source} holds {str(raw.iloc[row])!r} "
                         f"in data row {row + 1}, which is not a number; give one number per "
                         "instrument in that column")
    if empty.any():
        row = int(np.flatnonzero(empty)[0])
        raise InputError(f"column '{column}' ({label}) of {source} is empty in data row "
                         f"{row + 1}; fill it in or drop that instrument's row")
    return values.to_numpy(dtype=float)


def read_per_instrument(table: Any, columns: Mapping[str, str], name: str | None = None, *,
                        labels: Mapping[str, str] = CLI_OPTIONS) -> PerInstrumentTable:
    """Read the role columns of ``table`` (a path or a pandas frame).

    ``columns`` maps each of :data:`ROLES` to a column name; ``labels`` gives the option (or
    recipe key) that named it, for messages.
    """
    import pandas as pd

    if isinstance(table, pd.DataFrame):
        frame, source = table, "the table"
    else:
        frame = read_table(table)
        source = f"'{os.path.basename(os.fspath(table))}'"
    missing_roles = [labels[r] for r in ROLES if not columns.get(r)]
    if missing_roles:
        raise InputError(f"the per-instrument table needs the column of each role; name "
                         f"{', '.join(missing_roles)}")
    wanted = [(columns[r], labels[r]) for r in ROLES]
    if name is not None:
        wanted.append((name, labels["name"]))
    present = [str(c) for c in frame.columns]
    for column, label in wanted:
        if column not in present:
            raise InputError(f"column '{column}' ({label}) is not in {source}; its columns are "
                             f"{', '.join(present[:20])}{' ...' if len(present) > 20 else ''}; "
                             "name one of them")
    arrays = {r: _numbers(frame, columns[r], labels[r], source) for r in ROLES}
    names = None
    if name is not None:
        raw = frame[name]
        if raw.isna().any():
            row = int(np.flatnonzero(raw.isna().to_numpy())[0])
            raise InputError(f"column '{name}' ({labels['name']}) of {source} is empty in data "
                             f"row {row + 1}; give every instrument a name")
        names = tuple(str(v) for v in raw)
    return PerInstrumentTable(source, names, arrays)
