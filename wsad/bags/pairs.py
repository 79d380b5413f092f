"""Anomalous/normal bag pairs for ranking objectives."""
from __future__ import annotations

import torch

from .whole import WholeVideo


class AnomalousNormalPairs(WholeVideo):
    """Each batch holds ``per_class`` anomalous and ``per_class`` normal bags;
    the i-th anomalous bag is paired with the i-th normal bag (the pairs the
    MIL ranking hinge compares; Sultani et al., CVPR 2018). Bags are resampled
    to ``chunks`` (32 by default, from memory of the paper)."""

    def __init__(self, per_class: int = 30, chunks: int | None = 32):
        super().__init__(per_class=per_class, chunks=chunks)

    def pairs(self, batch_items):
        p = len(batch_items) // 2
        return torch.stack([torch.arange(p), torch.arange(p, 2 * p)], dim=1)
