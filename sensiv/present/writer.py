"""Writing output files: one JSON document per result and atomic bundles of files.

Files are written atomically: everything goes to a temporary folder beside the target first
and is moved into place only when every file has been written, so a failure leaves no
half-written output behind.
"""

from __future__ import annotations

import json
import os
import shutil
import tempfile
from collections.abc import Mapping
from pathlib import Path


def to_json(document: Mapping) -> str:
    """One JSON document: sorted keys for reproducibility, ``null`` for infinite ends."""
    return json.dumps(document, indent=2, sort_keys=True, allow_nan=False) + "\n"


def write_bundle(directory: str | os.PathLike, files: Mapping[str, str | bytes]) -> list[Path]:
    """Write ``files`` (name → content) into ``directory`` atomically.

    All files are first written to a temporary folder next to ``directory``; only when every
    write succeeded are they moved into place.  Names may contain ``/`` for subfolders.
    Returns the final paths.
    """
    target = Path(directory)
    parent = target.resolve().parent
    parent.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=f".{target.name}-", dir=parent))
    try:
        for name, content in files.items():
            path = staging / name
            path.parent.mkdir(parents=True, exist_ok=True)
            if isinstance(content, bytes):
                path.write_bytes(content)
            else:
                path.write_text(content, encoding="utf-8")
        target.mkdir(parents=True, exist_ok=True)
        out = []
        for name in files:
            final = target / name
            final.parent.mkdir(parents=True, exist_ok=True)
            os.replace(staging / name, final)
            out.append(final)
        return out
    finally:
        shutil.rmtree(staging, ignore_errors=True)
