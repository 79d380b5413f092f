"""Windows whose segments carry pseudo labels (self-training's second stage)."""
from __future__ import annotations

import numpy as np
import torch

from ..data.batch import Item
from ..errors import WsadError
from .windows import Windows


class PseudoLabelWindows(Windows):
    """:class:`Windows` over the training videos, each segment with a label of its own
    (1, 0, or -1 = none) given by :meth:`attach` before training starts."""

    gives_targets = True

    def __init__(self, size: int = 32, stride: int | None = None, order: str = "shuffled", batch_size: int = 32):
        super().__init__(size=size, stride=stride, order=order, batch_size=batch_size)
        self.labels: dict[str, np.ndarray] | None = None

    def attach(self, labels: dict[str, np.ndarray]) -> None:
        """Segment labels per video: int arrays of the video's length."""
        self.labels = labels

    def targets(self, batch_items: list[Item], width: int) -> torch.Tensor:
        if self.labels is None:
            raise WsadError("pseudo-labelled windows were batched before their labels were attached")
        out = np.full((len(batch_items), width), -1, np.int8)
        for i, it in enumerate(batch_items):
            out[i, :it.length] = self.labels[it.video][it.start:it.start + it.length]
        return torch.from_numpy(out)
