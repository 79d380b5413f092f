"""Training items and packed batches read from the store."""
from __future__ import annotations

from dataclasses import dataclass
from typing import Protocol

import numpy as np
import torch

from ..store.format import FeatureStore
from .cache import ArrayCache
from .chunks import resample_chunks
from .layout import padded
from .standardize import Standardizer


@dataclass(frozen=True)
class Item:
    """A training unit: segments [start, start + length) of one view of a video."""

    video: str
    view: int
    start: int
    length: int
    label: int


@dataclass
class Batch:
    """Packed bags. ``x`` [N, D] the real segments of bag 0, then bag 1, ...
    (N = mask.sum()), ``mask`` [B, T] (True = real segment),
    ``y`` [B] video labels, ``pairs`` [P, 2] rows (anomalous, normal) or None,
    ``targets`` [B, T] segment labels (1, 0, or -1 = no label) or None."""

    x: torch.Tensor
    mask: torch.Tensor
    y: torch.Tensor
    pairs: torch.Tensor | None = None
    targets: torch.Tensor | None = None

    def padded(self) -> torch.Tensor:
        """``x`` as [B, T, D] with zeros on padding."""
        return padded(self.x, self.mask)


class Construction(Protocol):
    """What the loader needs of a bag construction (see :mod:`wsad.bags`)."""

    chunks: int | None

    def pairs(self, batch_items: list[Item]) -> torch.Tensor | None: ...

    def targets(self, batch_items: list[Item], width: int) -> torch.Tensor | None: ...


class BagLoader:
    """Reads items from the store (memory maps), standardises them, resamples
    to chunks when asked, and packs a batch: ``x`` holds only the real
    segments, so padding costs neither copies nor arithmetic.

    Resampled bags are small and costly to make, so they go to ``cache`` and
    later epochs skip the reads. Bags kept at full length are cached while the
    budget lasts; past it they are read again from the memory map, which the
    operating system keeps in its page cache (outside the process's own memory).
    """

    def __init__(self, store: FeatureStore, construction: Construction,
                 standardizer: Standardizer, cache: ArrayCache | None = None):
        self.store, self.bags, self.std = store, construction, standardizer
        self.cache = cache if cache is not None else ArrayCache()

    def _prepared(self, video: str, view: int) -> np.ndarray | None:
        """The whole prepared view when it can be cached, else None."""
        key = ("train", video, view)
        x = self.cache.get(key)
        if x is not None:
            return x
        full_size = self.store.n_segments(video) * self.store.dim * 4
        if not self.bags.chunks and not self.cache.fits(full_size):
            return None
        x = self.std(self.store.view(video, view))
        if self.bags.chunks:
            x = resample_chunks(x, self.bags.chunks)
        self.cache.put(key, x)
        return x

    def _stored_rows(self, it: Item) -> np.ndarray:
        return self.store.view(it.video, it.view, slice(it.start, it.start + it.length))

    def collate(self, items: list[Item]) -> Batch:
        lengths = np.array([self.bags.chunks or it.length for it in items])
        prepared = [self._prepared(it.video, it.view) for it in items]
        if all(p is None for p in prepared):
            # nothing cached: the stored rows are concatenated as stored (float16 stays
            # half the bytes), then standardised in one pass
            x = torch.from_numpy(self.std(np.concatenate([self._stored_rows(it) for it in items])))
        else:
            rows = np.empty((int(lengths.sum()), self.store.dim), np.float32)
            r = 0
            for it, n, p in zip(items, lengths, prepared):
                if p is None:  # straight from the memory map into the batch
                    self.std.into(self._stored_rows(it), rows[r:r + n])
                else:
                    rows[r:r + n] = p if self.bags.chunks else p[it.start:it.start + it.length]
                r += n
            x = torch.from_numpy(rows)
        mask = np.arange(lengths.max())[None, :] < lengths[:, None]
        return Batch(x, torch.from_numpy(mask),
                     torch.tensor([it.label for it in items], dtype=torch.float32),
                     self.bags.pairs(items), self.bags.targets(items, mask.shape[1]))
