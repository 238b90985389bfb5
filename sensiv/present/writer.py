"""Writing output files: one JSON document per result and atomic bundles of files.

A bundle is published as a whole (:mod:`sensiv.present.publish`): everything goes to a temporary
folder beside the target first, which then replaces the target by directory renames, so a
failure or a kill leaves either the complete old bundle or the complete new one.
"""

from __future__ import annotations

import json
import os
import sys
from collections.abc import Callable, Mapping
from pathlib import Path

from sensiv.present.publish import publish


def to_json(document: Mapping) -> str:
    """One JSON document: sorted keys for reproducibility, ``null`` for infinite ends."""
    return json.dumps(document, indent=2, sort_keys=True, allow_nan=False) + "\n"


def write_bundle(directory: str | os.PathLike, files: Mapping[str, str | bytes],
                 report: Callable[[str], None] | None = None) -> list[Path]:
    """Publish ``files`` (name → content) as the bundle ``directory``, whole or not at all.

    The files are written into a temporary sibling folder and published with directory renames
    (:func:`sensiv.present.publish.publish`): ``directory`` then holds the complete new bundle,
    replacing an earlier sensiv bundle whole, or — after a failure or a kill — the complete
    old one.  An existing folder that is neither empty nor a sensiv bundle is refused with
    :class:`~sensiv.core.errors.InputError`.  Names may contain ``/`` for subfolders.  What was
    repaired from a killed earlier run is passed to ``report`` (default: printed on stderr).
    Returns the final paths.
    """
    if report is None:
        def report(note: str) -> None:
            sys.stderr.write(f"note: {note}\n")
    return publish(directory, files, report=report)
