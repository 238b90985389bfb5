"""Refuse, before any row is converted, a design whose float64 form cannot fit in memory.

Text and ``--categorical`` controls become one indicator column per level but the first, so
a control with thousands of levels multiplies the size of the data; without this check such
a design ends part-way through in a raw ``MemoryError`` (or the operating system kills the
process).  The estimate is the rows held at once times the design's columns times 8 bytes,
times the copies alive at the peak (:data:`FRAME_COPIES` for in-memory data, whose validated
chunks are kept; :data:`CHUNK_COPIES` for one streamed chunk during the second pass).
"""

from __future__ import annotations

from sensiv.core.errors import InputError
from sensiv.core.memory import available_memory, format_bytes

FRAME_COPIES = 1.2   # the kept chunks plus the chunk being converted (common practice, no source)
CHUNK_COPIES = 6.0   # a streamed chunk, its numeric columns and the second pass's products
MEMORY_SHARE = 0.9   # refuse above this share of the available memory
WIDE_CONTROLS = 3    # the widest text controls named in the message


def check_dense_size(columns: int, rows: int, levels: dict[str, tuple[str, ...]],
                     description: str, *, streamed: bool) -> None:
    """Raise :class:`InputError` when ``rows × columns`` float64 values (times the copies
    alive at once) exceed the memory available; silent where the memory is unknown."""
    copies = CHUNK_COPIES if streamed else FRAME_COPIES
    # The second pass also keeps a few (columns × columns) sums of products.
    needed = 8.0 * columns * (rows * copies + 8 * columns)
    available = available_memory()
    if available is None or needed <= MEMORY_SHARE * available:
        return
    wide = sorted(levels.items(), key=lambda item: -len(item[1]))[:WIDE_CONTROLS]
    named = ", ".join(f"{name!r} with {len(values) - 1:,} indicator columns"
                      for name, values in wide)
    held = f"a chunk of {rows:,} rows" if streamed else f"{rows:,} rows"
    raise InputError(
        f"the design of {description} has {columns:,} columns"
        + (f" once its text and categorical controls become indicator columns ({named})" if wide else "")
        + f"; as float64 for {held} that needs about {format_bytes(needed)}, more than the "
        f"{format_bytes(available)} of memory available. Absorb a control with many levels "
        "instead (--absorb COLUMN, recipe absorb = [...], API absorb=): its fixed effects "
        "are partialled out without indicator columns")
