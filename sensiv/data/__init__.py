"""Layer 1, data: readers (CSV, Parquet, Stata ``.dta``, data frames), the validated
:class:`Spec` of the roles, listwise deletion and chunking.  Nothing here computes a statistic
beyond counting rows.

The public names are re-exported here so that ``from sensiv.data import Spec, from_file``
reads as the layer's face.
"""

from sensiv.data.source import (Chunk, Layout, Source, Spec, from_chunks, from_file, from_frame,
                                load, read_table)

__all__ = ["Chunk", "Layout", "Source", "Spec", "from_chunks", "from_file", "from_frame",
           "load", "read_table"]
