"""Writing the invented example files (``python -m sensiv.demo DIR``): the two data sets as CSV
with fixed decimals, the published table as JSON and the demo recipe, byte-reproducible."""

from __future__ import annotations

import json
from pathlib import Path
from typing import TYPE_CHECKING

from sensiv.demo.generators import CSV_DECIMALS, irrigation, nudge, published_table
from sensiv.demo.per_instrument import per_instrument_csv
from sensiv.demo.recipe import demo_recipe

if TYPE_CHECKING:  # pandas is imported inside the functions that need it
    import pandas as pd


def write_examples(directory: str | Path) -> list[Path]:
    """Write ``irrigation.csv``, ``nudge.csv``, ``published_table.json``, the demo recipe
    ``demo.toml`` and the invented per-instrument table ``per_instrument.csv`` into
    ``directory``.

    Numbers are written with the fixed decimals of ``CSV_DECIMALS`` and ``\\n`` line endings,
    so the files are identical byte for byte on every run with the same numpy.

    Parameters
    ----------
    directory : str or pathlib.Path
        Created if missing.

    Returns
    -------
    list of pathlib.Path
        The files written, in the order above.
    """
    directory = Path(directory)
    directory.mkdir(parents=True, exist_ok=True)
    paths = []
    for data in (irrigation(), nudge()):
        path = directory / f"{data.name}.csv"
        path.write_bytes(csv_bytes(data.frame))
        paths.append(path)
    path = directory / "published_table.json"
    path.write_bytes((json.dumps(published_table(), indent=2) + "\n").encode("utf-8"))
    paths.append(path)
    path = directory / "demo.toml"
    path.write_bytes(demo_recipe().encode("utf-8"))
    paths.append(path)
    path = directory / "per_instrument.csv"
    path.write_bytes(per_instrument_csv())
    paths.append(path)
    return paths


def csv_bytes(frame: pd.DataFrame) -> bytes:
    """CSV text with fixed decimals per float column (integers and labels as they are)."""
    import pandas as pd

    out = pd.DataFrame(index=frame.index)
    for column in frame.columns:
        values = frame[column]
        if pd.api.types.is_float_dtype(values):
            digits = CSV_DECIMALS[column]
            out[column] = [f"{v:.{digits}f}" for v in values]
        else:  # integers and labels as they are
            out[column] = [str(v) for v in values]
    return out.to_csv(index=False, lineterminator="\n").encode("utf-8")


def main(argv: list[str] | None = None) -> int:
    """``python -m sensiv.demo [DIR]``: write the invented example files."""
    import argparse

    parser = argparse.ArgumentParser(
        prog="python -m sensiv.demo",
        description="Write the invented demo data sets (seeded, byte-reproducible) to DIR.",
    )
    parser.add_argument("directory", nargs="?", default="examples", help="default: examples")
    args = parser.parse_args(argv)
    for path in write_examples(args.directory):
        print(path)
    return 0
