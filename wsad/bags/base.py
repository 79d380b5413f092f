"""What every bag construction shares: the interface and two batching rules."""
from __future__ import annotations

import numpy as np
import torch

from ..data.batch import Item
from ..errors import WsadError
from ..store.format import FeatureStore


class BagConstruction:
    """How a video's segments become training items, and how items are grouped
    into batches each epoch. Subclasses validate their settings in
    ``__init__`` (one-line :class:`WsadError`), before any data is read.

    ``chunks``: None keeps every segment; an int resamples each bag to that many
    chunks (test videos are then scored per chunk and mapped back).
    """

    chunks: int | None = None

    def items(self, store: FeatureStore, videos: list[str]) -> list[Item]:
        raise NotImplementedError

    def batches(self, items: list[Item], epoch: int, seed: int) -> list[list[int]]:
        raise NotImplementedError

    #: True when batches carry segment targets (``targets`` below), which some terms need
    gives_targets: bool = False

    def pairs(self, batch_items: list[Item]) -> torch.Tensor | None:
        """[P, 2] rows (anomalous, normal) of the batch, or None when it has no pairs."""
        return None

    def targets(self, batch_items: list[Item], width: int) -> torch.Tensor | None:
        """[B, width] segment labels of the batch (1, 0, -1 = none), or None."""
        return None


def video_items(store: FeatureStore, videos: list[str]) -> list[Item]:
    """One item per view of each video, spanning all its segments."""
    return [Item(v, k, 0, store.n_segments(v), store.label(v))
            for v in videos for k in range(store.n_views(v))]


def balanced_batches(items: list[Item], per_class: int, epoch: int, seed: int) -> list[list[int]]:
    """Batches of ``per_class`` anomalous + ``per_class`` normal items.

    An epoch visits every item of the larger class once; the smaller class is
    cycled through reshuffled passes. The i-th anomalous and the i-th normal
    item of a batch sit at rows i and per_class + i.
    """
    rng = np.random.default_rng([seed, epoch, 31])
    pos = np.array([i for i, it in enumerate(items) if it.label == 1])
    neg = np.array([i for i, it in enumerate(items) if it.label == 0])
    if len(pos) == 0 or len(neg) == 0:
        raise WsadError("balanced batches need anomalous and normal training videos; "
                        "the training split has only one label")
    n_batches = int(np.ceil(max(len(pos), len(neg)) / per_class))
    need = n_batches * per_class

    def stream(idx: np.ndarray) -> np.ndarray:
        reps = int(np.ceil(need / len(idx)))
        return np.concatenate([rng.permutation(idx) for _ in range(reps)])[:need]

    p, n = stream(pos), stream(neg)
    return [list(p[b * per_class:(b + 1) * per_class]) + list(n[b * per_class:(b + 1) * per_class])
            for b in range(n_batches)]
