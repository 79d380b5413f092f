"""Parallel dilated 1-D convolutions over the segment axis (multi-scale temporal context)."""
from __future__ import annotations

from collections.abc import Sequence

import torch
from torch import nn

from ..data.layout import padded
from ..errors import WsadError
from .base import Dropout, HeadOutput, check_sizes, mlp_layers


class DilatedConvHead(nn.Module):
    """h_t = ReLU( sum_r sum_{j=-1..1} W_{r,j} x_{t + j r} ) for dilations r (1, 2, 4 by
    default): kernel-3 convolutions at several time scales, summed, over real segments
    only (padding is zeroed first); then the MLP scorer on h_t (common practice).

    Shape:
        x: [N, D] packed or [B, T, D] padded; mask: [B, T]; logits [B, T], embeddings [B, T, H].
    """

    def __init__(self, in_dim: int, hidden: Sequence[int] = (128, 32), dilations: Sequence[int] = (1, 2, 4),
                 dropout: float = 0.3):
        super().__init__()
        hidden = check_sizes(hidden)
        dilations = [int(r) for r in dilations]
        if not dilations or min(dilations) < 1:
            raise WsadError(f"head.dilations={dilations}; give at least one positive dilation")
        self.convs = nn.ModuleList(nn.Conv1d(in_dim, hidden[0], 3, padding=r, dilation=r) for r in dilations)
        self.act = nn.ReLU()
        self.drop = Dropout(dropout)
        self.score = mlp_layers(hidden, dropout)

    def forward(self, x: torch.Tensor, mask: torch.Tensor) -> HeadOutput:
        x = padded(x, mask).transpose(1, 2)          # [B, D, T]: the convolutions need the time axis
        h = self.act(sum(conv(x) for conv in self.convs)).transpose(1, 2)
        return HeadOutput(logits=self.score(self.drop(h)).squeeze(-1), embeddings=h, mask=mask)
