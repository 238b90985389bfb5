"""Integer codes of labels met chunk by chunk (clusters, the levels of a fixed effect), in the
order of first appearance, and the cluster label columns of a chunk."""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np


class LabelCodes:
    """Maps labels (of clusters, or of a fixed effect's levels) met in successive chunks to
    consecutive integer codes, in the order of first appearance."""

    def __init__(self) -> None:
        self._codes: dict = {}

    def encode(self, labels: np.ndarray) -> tuple[np.ndarray, int]:
        """The codes of ``labels`` and the number of labels met so far."""
        codes, n_codes, _ = self.encode_counted(labels)
        return codes, n_codes

    def encode_counted(self, labels: np.ndarray) -> tuple[np.ndarray, int, int]:
        """:meth:`encode`, and the number of distinct labels in ``labels`` itself."""
        import pandas as pd

        local, uniques = pd.factorize(labels, sort=False)
        mapping = np.empty(len(uniques), dtype=np.int64)
        for j, label in enumerate(uniques.tolist()):
            code = self._codes.get(label)
            if code is None:
                code = len(self._codes)
                self._codes[label] = code
            mapping[j] = code
        return mapping[local], len(self._codes), len(uniques)

    def __len__(self) -> int:
        return len(self._codes)

    def labels(self) -> list:
        """The labels met so far, in the order of their codes."""
        return list(self._codes)


def cluster_label_columns(clusters: np.ndarray) -> list[np.ndarray]:
    """The label column of each cluster variable (two for two-way clustering)."""
    return [clusters] if clusters.ndim == 1 else [clusters[:, j] for j in range(clusters.shape[1])]


def count_clusters(chunks: Iterable) -> tuple[int, ...]:
    """Distinct cluster labels per cluster variable (one, or two for two-way) in ``chunks``."""
    indices: list[LabelCodes] = []
    for chunk in chunks:
        labels = chunk.clusters
        columns = cluster_label_columns(labels)
        indices = indices or [LabelCodes() for _ in columns]
        for index, column in zip(indices, columns):
            index.encode(column)
    return tuple(len(index) for index in indices)
