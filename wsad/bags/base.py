"""The parts every bag construction shares: items, batches, reading and padding."""
from __future__ import annotations

import warnings
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
    """Packed bags. ``x`` [N, D] the real segments of bag 0, then bag 1, ...
    (N = mask.sum()), ``mask`` [B, T] (True = real segment),
    ``y`` [B] video labels, ``pairs`` [P, 2] rows (anomalous, normal) or None."""

    x: torch.Tensor
    mask: torch.Tensor
    y: torch.Tensor
    videos: list[str]
    pairs: torch.Tensor | None = None

    def padded(self) -> torch.Tensor:
        """``x`` as [B, T, D] with zeros on padding."""
        from ..heads.base import padded
        return padded(self.x, self.mask)


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
    """Per-dim (x - mean) / std fitted on training segments (streamed, float64).

    Applied as (x - mean) * (1 / std) in float32, the same arithmetic in
    training and scoring, so a bag gets the same numbers on either path."""

    def __init__(self, mean: np.ndarray | None = None, std: np.ndarray | None = None):
        self.mean, self.std = mean, std
        self.inv = None if std is None else (1.0 / std.astype(np.float64)).astype(np.float32)
        self._mean_t = None if mean is None else torch.from_numpy(mean)
        self._inv_t = None if std is None else torch.from_numpy(self.inv)

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
        """A new float32 array (``x`` may be a read-only float16 memory map)."""
        out = np.empty(x.shape, np.float32)
        return self.into(x, out)

    def into(self, x: np.ndarray, out: np.ndarray) -> np.ndarray:
        """Standardise ``x`` (any float dtype) into the float32 array ``out``
        in place, no temporary. Torch does the float16 conversion and the
        arithmetic: several times faster than NumPy's on 2 cores."""
        t = torch.from_numpy(out)
        t.copy_(_readonly_tensor(x))
        if self.mean is not None:
            t.sub_(self._mean_t).mul_(self._inv_t)
        return out

    def state(self) -> dict:
        return {"mean": None if self.mean is None else torch.from_numpy(self.mean),
                "std": None if self.std is None else torch.from_numpy(self.std)}

    @classmethod
    def from_state(cls, state: dict) -> "Standardizer":
        m, s = state.get("mean"), state.get("std")
        return cls(None if m is None else m.numpy(), None if s is None else s.numpy())


def _readonly_tensor(x: np.ndarray) -> torch.Tensor:
    """A tensor over ``x`` without a copy; read-only memory maps are only read here."""
    if x.flags.writeable:
        return torch.from_numpy(x)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # torch warns that it cannot protect them
        return torch.from_numpy(x)


class ArrayCache:
    """Prepared arrays kept in RAM up to a byte budget (first come, first kept).
    One cache serves a run's training bags and its evaluation arrays, so
    ``data.cache_mb`` bounds both together."""

    def __init__(self, budget_mb: float = 512.0):
        if budget_mb < 0:
            from ..errors import WsadError
            raise WsadError(f"data.cache_mb={budget_mb}; use 0 (no cache) or a positive size")
        self.budget, self.used = int(budget_mb * 2 ** 20), 0
        self.arrays: dict = {}

    def get(self, key):
        return self.arrays.get(key)

    def put(self, key, x: np.ndarray) -> None:
        if key not in self.arrays and self.used + x.nbytes <= self.budget:
            self.arrays[key] = x
            self.used += x.nbytes


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
    """Reads items from the store (memory maps), standardises them, resamples
    to chunks when asked, and packs a batch: ``x`` holds only the real
    segments, so padding costs neither copies nor arithmetic.

    Resampled bags are small and costly to make, so they go to ``cache`` and
    later epochs skip the reads. Bags kept at full length are cached while the
    budget lasts; past it they are read again from the memory map, which the
    operating system keeps in its page cache (outside the process's own memory).
    """

    def __init__(self, store: FeatureStore, construction: BagConstruction,
                 standardizer: Standardizer, cache: ArrayCache | float | None = None):
        self.store, self.bags, self.std = store, construction, standardizer
        self.cache = cache if isinstance(cache, ArrayCache) else ArrayCache(
            512.0 if cache is None else float(cache))

    def _prepared(self, video: str, view: int) -> np.ndarray | None:
        """The whole prepared view when it can be cached, else None."""
        key = ("train", video, view)
        x = self.cache.get(key)
        if x is not None:
            return x
        full_size = self.store.n_segments(video) * self.store.dim * 4
        if not self.bags.chunks and self.cache.used + full_size > self.cache.budget:
            return None
        x = self.std(self.store.view(video, view))
        if self.bags.chunks:
            x = resample_chunks(x, self.bags.chunks)
        self.cache.put(key, x)
        return x

    def _from_maps(self, items: list[Item]) -> torch.Tensor:
        """A batch with nothing cached: the stored rows are concatenated as
        stored (float16 stays half the bytes), then standardised in one pass."""
        return torch.from_numpy(self.std(np.concatenate(
            [self.store.view(it.video, it.view)[it.start:it.start + it.length] for it in items])))

    def collate(self, items: list[Item]) -> Batch:
        lengths = np.array([self.bags.chunks or it.length for it in items])
        prepared = [self._prepared(it.video, it.view) for it in items]
        if all(p is None for p in prepared):
            x = self._from_maps(items)
        else:
            x = np.empty((int(lengths.sum()), self.store.dim), np.float32)
            r = 0
            for it, n, p in zip(items, lengths, prepared):
                if p is None:  # straight from the memory map into the batch
                    raw = self.store.view(it.video, it.view)[it.start:it.start + it.length]
                    self.std.into(raw, x[r:r + n])
                else:
                    x[r:r + n] = p if self.bags.chunks else p[it.start:it.start + it.length]
                r += n
            x = torch.from_numpy(x)
        mask = np.arange(lengths.max())[None, :] < lengths[:, None]
        return Batch(x, torch.from_numpy(mask),
                     torch.tensor([it.label for it in items], dtype=torch.float32),
                     [it.video for it in items], self.bags.pairs(items))
