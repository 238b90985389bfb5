"""``--label COLUMN="TEXT"``: the reader-facing names of columns, on every command.

A command parses its repeated ``--label`` with :func:`put_in_force` once it knows the columns
its model uses; the labels then hold for the rest of the command (the guard of
:mod:`sensiv.cli.app` restores the previous ones afterwards), and :func:`document` adds them
to its JSON under ``labels``.  See :mod:`sensiv.core.labels` for the unit rule.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Optional

import typer

from sensiv.core import labels

LABEL = typer.Option(
    None, "--label", metavar="COLUMN=TEXT",
    help="Name a column for readers, e.g. --label irrigation_hours=\"Irrigation (hours)\"; "
         "repeat for several. A trailing (unit) gives its unit: effects then read "
         "\"t/ha per hour\", direct effects \"t/ha\". Figures and text only; JSON keeps the "
         "column names and adds 'labels'.")

PUBLISHED_LABEL = typer.Option(
    None, "--label", metavar="ROLE=TEXT",
    help="Name the outcome, treatment or instrument for readers, e.g. --label "
         "treatment=\"Schooling (years)\"; repeat. A trailing (unit) gives its unit.")

def published_roles() -> tuple[str, ...]:
    """What ``sensiv published`` may label: printed numbers carry no column names."""
    from sensiv.sensitivity import published_covariance

    return published_covariance.ROLES


def put_in_force(values: Optional[list[str]], columns: Iterable[str]) -> labels.Labels:
    """Parse ``--label`` values, refuse a column outside ``columns``, and put them in force."""
    parsed = labels.parse(values or None)
    labels.check_columns(parsed, columns)
    labels.activate(parsed)
    return parsed


def document(doc: Mapping) -> dict:
    """``doc`` with the labels in force under ``labels`` (``{}`` without any)."""
    return labels.document(doc)
