"""Layer 1, data: readers (CSV, Parquet, Stata ``.dta``, data frames), the validated
:class:`Spec` of the roles, listwise deletion and chunking.  Nothing here computes a statistic
beyond counting rows.

Modules, lowest first: ``spec`` (the roles and their checks), ``convert`` (column-level
conversion, missing values, text levels, tallies), ``source`` (:class:`Source`, :class:`Chunk`,
:class:`Layout`: the clean chunk stream), ``readers`` (files and frames).  The public names are
re-exported here so that ``from sensiv.data import Spec, from_file`` reads as the layer's face.
"""

from sensiv.data.datasets import ENGINES, with_engine
from sensiv.data.readers import from_chunks, from_file, from_frame, load, read_table
from sensiv.data.source import Chunk, Layout, Source
from sensiv.data.spec import Spec

__all__ = ["ENGINES", "with_engine", "Chunk", "Layout", "Source", "Spec", "from_chunks", "from_file", "from_frame",
           "load", "read_table"]
