"""A 1-D convolution over the segment axis before the scorer."""
from __future__ import annotations

from collections.abc import Sequence

import torch
from torch import nn

from ..data.layout import padded
from ..errors import WsadError
from .base import Dropout, HeadOutput, check_sizes, mlp_layers


class TemporalConvHead(nn.Module):
    """h_t = ReLU( sum_{j=-k/2..k/2} W_j x_{t+j} ) over real segments only
    (padding is zeroed first), then the MLP scorer on h_t. Gives each
    segment's score the context of its neighbours (common practice).

    Shape:
        x: [N, D] packed or [B, T, D] padded; mask: [B, T]; logits [B, T],
        embeddings [B, T, H].
    """

    def __init__(self, in_dim: int, hidden: Sequence[int] = (128, 32), kernel: int = 5,
                 dropout: float = 0.3):
        super().__init__()
        hidden = check_sizes(hidden)
        if kernel < 1 or kernel % 2 == 0:
            raise WsadError(f"head.kernel={kernel}; use an odd kernel size >= 1")
        self.conv = nn.Conv1d(in_dim, hidden[0], kernel, padding=kernel // 2)
        self.act = nn.ReLU()
        self.drop = Dropout(dropout)
        self.score = mlp_layers(hidden, dropout)

    def forward(self, x: torch.Tensor, mask: torch.Tensor) -> HeadOutput:
        x = padded(x, mask)  # the convolution needs the time axis
        h = self.act(self.conv(x.transpose(1, 2)).transpose(1, 2))
        return HeadOutput(logits=self.score(self.drop(h)).squeeze(-1), embeddings=h, mask=mask)
