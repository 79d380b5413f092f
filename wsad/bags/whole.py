"""Whole-video bags: one bag per video (per view)."""
from __future__ import annotations

from ..data.batch import Item
from ..errors import WsadError
from .base import BagConstruction, balanced_batches, video_items


class WholeVideo(BagConstruction):
    """One bag per video, balanced batches of anomalous and normal videos.

    ``chunks=None`` keeps the video's own length (padded with a mask);
    ``chunks=32`` averages 32 equal spans of segments, so every bag has 32
    instances (common practice since the MIL ranking paper, Sultani et al.,
    CVPR 2018; from memory).
    """

    def __init__(self, per_class: int = 16, chunks: int | None = None):
        if per_class < 1:
            raise WsadError(f"bags.per_class={per_class}; need at least 1 video per class per batch")
        if chunks is not None and chunks < 1:
            raise WsadError(f"bags.chunks={chunks}; use a positive count or null")
        self.per_class, self.chunks = int(per_class), (int(chunks) if chunks else None)

    def items(self, store, videos) -> list[Item]:
        return video_items(store, videos)

    def batches(self, items, epoch, seed):
        return balanced_batches(items, self.per_class, epoch, seed)
