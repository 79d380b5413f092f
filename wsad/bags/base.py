"""The parts every bag construction shares: items, batches, reading and padding."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import torch

from ..evaluate import chunk_bounds
from ..store.format import FeatureStore


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
    """Padded bags. ``x`` [B, T, D], ``mask`` [B, T] (True = real segment),
    ``y`` [B] video labels, ``pairs`` [P, 2] rows (anomalous, normal) or None."""

    x: torch.Tensor
    mask: torch.Tensor
    y: torch.Tensor
    videos: list[str]
    pairs: torch.Tensor | None = None


def resample_chunks(x: np.ndarray, n_chunks: int) -> np.ndarray:
    """[T, D] -> [C, D] by averaging C equal spans of segments; a span that is
    empty (T < C) takes the segment at its start (common practice)."""
    t = len(x)
    b = chunk_bounds(t, n_chunks)
    csum = np.concatenate([np.zeros((1, x.shape[1]), np.float64), np.cumsum(x, axis=0, dtype=np.float64)])
    lo, hi = b[:-1], b[1:]
    out = (csum[hi] - csum[lo]) / np.maximum(hi - lo, 1)[:, None]
    empty = hi == lo
    out[empty] = x[np.minimum(lo[empty], t - 1)]
    return out.astype(np.float32)


class Standardizer:
    """Per-dim (x - mean) / std fitted on training segments (streamed, float64)."""

    def __init__(self, mean: np.ndarray | None = None, std: np.ndarray | None = None):
        self.mean, self.std = mean, std

    @classmethod
    def fit(cls, store: FeatureStore, videos: list[str]) -> "Standardizer":
        s = ss = None
        n = 0
        for v in videos:
            x = store.views(v).reshape(-1, store.dim).astype(np.float64)
            s = x.sum(0) if s is None else s + x.sum(0)
            ss = (x ** 2).sum(0) if ss is None else ss + (x ** 2).sum(0)
            n += len(x)
        mean = s / n
        std = np.sqrt(np.maximum(ss / n - mean ** 2, 1e-12))
        return cls(mean.astype(np.float32), std.astype(np.float32))

    def __call__(self, x: np.ndarray) -> np.ndarray:
        if self.mean is None:
            return x
        return (x - self.mean) / self.std

    def state(self) -> dict:
        return {"mean": None if self.mean is None else torch.from_numpy(self.mean),
                "std": None if self.std is None else torch.from_numpy(self.std)}

    @classmethod
    def from_state(cls, state: dict) -> "Standardizer":
        m, s = state.get("mean"), state.get("std")
        return cls(None if m is None else m.numpy(), None if s is None else s.numpy())


class BagConstruction:
    """Base class. Subclasses set how items are cut and batched.

    ``chunks``: None keeps every segment; an int resamples each bag to that many
    chunks (test videos are then scored per chunk and mapped back).
    """

    chunks: int | None = None
    name = "base"

    def items(self, store: FeatureStore, videos: list[str]) -> list[Item]:
        raise NotImplementedError

    def batches(self, items: list[Item], epoch: int, seed: int) -> list[list[int]]:
        raise NotImplementedError

    def pairs(self, batch_items: list[Item]) -> torch.Tensor | None:
        return None



def video_items(store: FeatureStore, videos: list[str]) -> list[Item]:
    """One item per view of each video, spanning all its segments."""
    return [Item(v, k, 0, store.n_segments(v), store.label(v))
            for v in videos for k in range(store.n_views(v))]


def balanced_batches(items: list[Item], per_class: int, epoch: int, seed: int,
                     aligned: bool = False) -> list[list[int]]:
    """Batches of ``per_class`` anomalous + ``per_class`` normal items.

    An epoch visits every item of the larger class once; the smaller class is
    cycled through reshuffled passes. With ``aligned`` the i-th anomalous and
    i-th normal items of a batch form a pair.
    """
    rng = np.random.default_rng([seed, epoch, 31])
    pos = np.array([i for i, it in enumerate(items) if it.label == 1])
    neg = np.array([i for i, it in enumerate(items) if it.label == 0])
    if len(pos) == 0 or len(neg) == 0:
        from ..errors import WsadError
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


class BagLoader:
    """Reads items from the store (memory maps), standardises, resamples to
    chunks when asked, and pads a batch. Prepared items are kept in RAM up to
    ``cache_mb`` so later epochs skip the reads."""

    def __init__(self, store: FeatureStore, construction: BagConstruction,
                 standardizer: Standardizer, cache_mb: float = 1024.0):
        self.store, self.bags, self.std = store, construction, standardizer
        self.cache: dict[tuple, np.ndarray] = {}
        self.cache_budget = int(cache_mb * 2 ** 20)
        self.cache_used = 0

    def _video_view(self, video: str, view: int) -> np.ndarray:
        key = (video, view)
        x = self.cache.get(key)
        if x is None:
            arr = self.store.views(video)[view]
            x = self.std(arr)
            if self.bags.chunks:
                x = resample_chunks(x, self.bags.chunks)
            x = np.ascontiguousarray(x, dtype=np.float32)
            if self.cache_used + x.nbytes <= self.cache_budget:
                self.cache[key] = x
                self.cache_used += x.nbytes
        return x

    def features(self, item: Item) -> np.ndarray:
        x = self._video_view(item.video, item.view)
        if self.bags.chunks:
            return x
        return x[item.start:item.start + item.length]

    def collate(self, items: list[Item]) -> Batch:
        feats = [self.features(it) for it in items]
        t = max(len(f) for f in feats)
        x = np.zeros((len(feats), t, self.store.dim), np.float32)
        mask = np.zeros((len(feats), t), bool)
        for i, f in enumerate(feats):
            x[i, :len(f)] = f
            mask[i, :len(f)] = True
        return Batch(torch.from_numpy(x), torch.from_numpy(mask),
                     torch.tensor([it.label for it in items], dtype=torch.float32),
                     [it.video for it in items], self.bags.pairs(items))
