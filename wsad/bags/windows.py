"""Contiguous windows of consecutive segments."""
from __future__ import annotations

import numpy as np

from ..data.batch import Item
from ..errors import WsadError
from .base import BagConstruction

ORDERS = ("sequential", "shuffled")


class Windows(BagConstruction):
    """Windows of ``size`` consecutive segments every ``stride`` segments, each
    carrying its video's label; a last window is aligned to the video's end so
    every segment is covered, and a video shorter than ``size`` is one
    (padded) window.

    ``order``: ``sequential`` takes windows in manifest order, then time (so
    consecutive updates see one camera's correlated stream); ``shuffled``
    draws a new random order over all windows of all videos every epoch, the
    remedy used in the field to break that correlation. Either way every window is
    visited exactly once per epoch.
    """

    def __init__(self, size: int = 32, stride: int | None = None, order: str = "shuffled",
                 batch_size: int = 32):
        if order not in ORDERS:
            raise WsadError(f"bags.order={order!r} is not known; use one of {list(ORDERS)}")
        stride = size if stride is None else stride
        if size < 1 or stride < 1 or batch_size < 1:
            raise WsadError(f"bags.size={size}, bags.stride={stride}, bags.batch_size={batch_size}: "
                            "all must be >= 1")
        self.size, self.stride, self.order, self.batch_size = int(size), int(stride), order, int(batch_size)

    def items(self, store, videos) -> list[Item]:
        out = []
        for v in videos:
            t, lab = store.n_segments(v), store.label(v)
            starts = list(range(0, max(1, t - self.size + 1), self.stride))
            if t > self.size and starts[-1] + self.size < t:
                starts.append(t - self.size)
            for k in range(store.n_views(v)):
                out += [Item(v, k, s, min(self.size, t - s), lab) for s in starts]
        return out

    def batches(self, items, epoch, seed):
        idx = np.arange(len(items))
        if self.order == "shuffled":
            idx = np.random.default_rng([seed, epoch, 37]).permutation(len(items))
        return [list(idx[s:s + self.batch_size]) for s in range(0, len(idx), self.batch_size)]
