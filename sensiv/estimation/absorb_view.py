"""One absorbed fixed effect on the engines that read the rows themselves (``duckdb``,
``dask``): a *pass 0* gathers per-level sums as a group-by (row counts, weight sums, weighted
means, the within-level minimum and maximum of every column, and whether each level meets a
single cluster), and every later pass demeans the rows by the level means on the engine (a
join with the level means in SQL, the broadcast means in every Dask task).

The numbers are those of the numpy engine's streamed one-way absorption
(:mod:`sensiv.estimation.absorbed_source`): the same singletons dropped, the same absorbed
controls dropped, the same levels counted.  This module holds what both share: the per-level
state (:class:`Stream`), the demeaning of one chunk, and the checks of which columns the fixed
effect absorbs.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Iterable, Iterator
from dataclasses import dataclass

import numpy as np

from sensiv.core.errors import InputError
from sensiv.data.source import Chunk, Layout
from sensiv.estimation import absorb as fe


@dataclass(frozen=True, slots=True)
class Stream:
    """Per-level state of a streamed one-way absorption."""

    labels: object  # pandas.Index of the levels
    counts: np.ndarray
    offset: np.ndarray  # level means of the shifted columns, shape (levels, columns)
    shift: np.ndarray
    keep_columns: np.ndarray


@dataclass(frozen=True, slots=True)
class GroupStats:
    """What an engine's pass 0 returns: per level (in the order of ``labels``) the rows,
    weight sums, weighted means and extremes of every model column, and per level and cluster
    variable whether the level meets a single cluster (``None`` without clusters)."""

    labels: object  # pandas.Index
    counts: np.ndarray
    totals: np.ndarray
    means: np.ndarray  # (levels, columns)
    lows: np.ndarray
    highs: np.ndarray
    single_cluster: np.ndarray | None  # (levels, cluster variables) of bool


@dataclass(frozen=True, slots=True)
class GroupAbsorbed:
    """A source whose passes run on ``engine`` over ``base`` (the raw rows) with the one fixed
    effect of ``spec.absorb`` demeaned by the level means of ``stream``."""

    base: object
    spec: object
    layout: Layout
    description: str
    absorption: fe.Absorption
    stream: Stream
    notes: tuple[str, ...] = ()

    @property
    def engine(self) -> str:
        return self.base.engine

    @property
    def scheduler(self) -> str | None:
        return self.base.scheduler

    @property
    def origin(self):
        return self.base.origin

    @property
    def in_memory(self) -> bool:
        return False

    def chunks(self) -> Iterator[Chunk]:
        """The demeaned chunks, read in this process (for the analyses that need rows)."""
        return demean_chunks(self.base.chunks(), self.stream, self.spec.absorb[0],
                             self.description)


def demean_chunks(chunks: Iterable[Chunk], stream: Stream, effect: str, description: str
                  ) -> Iterator[Chunk]:
    """Each chunk without singleton rows, its columns ``keep_columns`` minus their level means."""
    s = stream
    for chunk in chunks:
        if chunk.values.shape[0] == 0:
            yield dataclasses.replace(chunk, values=chunk.values[:, s.keep_columns])
            continue
        codes = np.asarray(s.labels.get_indexer(chunk.groups[0]))
        if (codes < 0).any():
            raise InputError(f"fixed effect '{effect}' in {description} has a level that was "
                             "absent in the first pass; the data changed between passes: "
                             "reload it")
        keep = s.counts[codes] > 1
        every = bool(keep.all())
        if not every:
            codes = codes[keep]
        values = np.empty((codes.size, s.keep_columns.size), order="F")
        for out, j in enumerate(s.keep_columns):
            column = chunk.values[:, j] if every else chunk.values[keep, j]
            np.subtract(column, s.shift[out], out=values[:, out])
            values[:, out] -= s.offset[:, out][codes]
        yield Chunk(values,
                    chunk.weights if every or chunk.weights is None else chunk.weights[keep],
                    chunk.clusters if every or chunk.clusters is None
                    else chunk.clusters[keep], chunk.n_dropped, chunk.n_filtered, None)


class LevelCodes:
    """Codes of a fixed effect's levels met in successive chunks, consecutive in the order of
    first appearance (as :class:`sensiv.estimation.label_codes.LabelCodes`), found by one hash
    look-up of each chunk's distinct labels among the known ones: no Python loop over the
    levels, which a fixed effect of 100,000 levels met in every chunk would cost."""

    def __init__(self) -> None:
        self._known = None  # pandas.Index of the labels, in the order of their codes

    def encode(self, labels: np.ndarray) -> tuple[np.ndarray, int]:
        import pandas as pd

        local, uniques = pd.factorize(labels, sort=False)
        uniques = pd.Index(uniques)
        if self._known is None:
            self._known = uniques
            return local.astype(np.int64, copy=False), len(uniques)
        mapping = np.asarray(self._known.get_indexer(uniques), dtype=np.int64)
        new = mapping < 0
        if new.any():
            mapping[new] = len(self._known) + np.arange(int(new.sum()))
            self._known = self._known.append(uniques[new])
        return mapping[local], len(self._known)

    def labels(self):
        """The labels met so far (a pandas Index), in the order of their codes."""
        import pandas as pd

        return pd.Index([]) if self._known is None else self._known


# ----------------------------------------------------------------------------- checks
def model_roles(layout: Layout) -> list[tuple[str, str]]:
    """``(role, column)`` of every model column of ``layout``, in the order of its columns."""
    return [("outcome", layout.outcome), *(("treatment", t) for t in layout.treatments),
            *(("instrument", i) for i in layout.instruments),
            *(("control", c) for c in layout.controls)]


def _control_of(layout: Layout, column: str) -> str:
    for name, levels in layout.categorical:
        if column in {f"{name}[{level}]" for level in levels}:
            return name
    return column


def refusal(role: str, column: str, effects: list[str]) -> InputError:
    """The message for a treatment, instrument or outcome the fixed effects absorb."""
    where = (f"'{effects[0]}'" if len(effects) == 1 else
             "the fixed effects " + " and ".join(f"'{e}'" for e in effects) + " together")
    return InputError(f"{role} '{column}' does not vary within {where}; it is absorbed by the "
                      f"fixed effect{'s' if len(effects) > 1 else ''}: drop it from --absorb or "
                      f"choose another {role}")


def apply_drops(absorbed: list[int], layout: Layout, effects: tuple[str, ...]
                ) -> tuple[np.ndarray, Layout, tuple[str, ...], tuple[str, ...]]:
    """Columns kept, the layout without absorbed controls, the dropped controls, the notes
    (InputError when a column other than a control is absorbed)."""
    roles = model_roles(layout)
    for j in absorbed:
        role, column = roles[j]
        if role != "control":
            raise refusal(role, column, list(effects))
    dropped = [roles[j][1] for j in absorbed]
    keep = np.array([j for j in range(len(roles)) if j not in set(absorbed)], dtype=int)
    controls = tuple(c for c in layout.controls if c not in dropped)
    categorical = tuple((name, tuple(lv for lv in levels if f"{name}[{lv}]" in controls))
                        for name, levels in layout.categorical)
    new_layout = dataclasses.replace(layout, controls=controls,
                                     categorical=tuple(p for p in categorical if p[1]))
    names = tuple(dict.fromkeys(_control_of(layout, c) for c in dropped))
    listed = " and ".join(f"'{e}'" for e in effects)
    notes = tuple(f"control '{name}' has no variation left within the fixed effect"
                  f"{'s' if len(effects) > 1 else ''} {listed}; it is absorbed and was dropped"
                  for name in names)
    return keep, new_layout, names, notes


def group_absorbed(source, stats: GroupStats) -> GroupAbsorbed:
    """``source`` (read by its engine) with its one fixed effect absorbed from ``stats``."""
    spec, layout = source.spec, source.layout
    kept = stats.counts > 1
    n_singletons = int(stats.counts[~kept].sum())
    if not kept.any():
        raise InputError(f"every row of {source.description} is alone in its level of the "
                         f"fixed effect '{spec.absorb[0]}'; nothing is left to fit")
    flat = np.all(stats.highs[kept] - stats.lows[kept] == 0.0, axis=0)
    absorbed = [j for j in range(flat.size) if flat[j]]
    keep_cols, new_layout, dropped, notes = apply_drops(absorbed, layout, spec.absorb)
    levels = int(kept.sum())
    nested = (stats.single_cluster is not None
              and bool(np.any(np.all(stats.single_cluster[kept], axis=0))),)
    counted = (levels - int(layout.constant),)  # the constant, if any, takes one level
    absorption = fe.Absorption(spec.absorb, (levels,), counted, nested, n_singletons, 1,
                               0.0, fe.DEFAULT_TOLERANCE, dropped, streamed=True)
    stream = Stream(stats.labels, stats.counts,
                    np.asfortranarray(stats.means[:, keep_cols]),
                    np.zeros(keep_cols.size), keep_cols)
    return GroupAbsorbed(source, spec, new_layout, source.description, absorption, stream,
                         tuple(getattr(source, "notes", ())) + notes)
