"""A per-segment MLP scorer."""
from __future__ import annotations

from collections.abc import Sequence

import torch
from torch import nn

from ..data.layout import real_rows, unpack
from .base import Dropout, HeadOutput, check_sizes, mlp_layers


class MLPHead(nn.Module):
    """s_t = sigmoid(MLP(x_t)): Linear-ReLU-Dropout per hidden size, then one
    logit. ``hidden=[512, 32]`` with dropout 0.6 is the MIL ranking head
    (Sultani et al., CVPR 2018; from memory).

    Shape:
        x: [N, D] packed or [B, T, D] padded; mask: [B, T]; logits [B, T],
        embeddings [N, H] (H = hidden[0]).
    """

    def __init__(self, in_dim: int, hidden: Sequence[int] = (512, 32), dropout: float = 0.6):
        super().__init__()
        hidden = check_sizes(hidden)
        self.embed = nn.Sequential(nn.Linear(in_dim, hidden[0]), nn.ReLU())
        self.drop = Dropout(dropout)
        self.score = mlp_layers(hidden, dropout)

    def forward(self, x: torch.Tensor, mask: torch.Tensor) -> HeadOutput:
        # score real segments only: padding costs nothing (bags vary in length)
        h = self.embed(real_rows(x, mask))
        logits = self.score(self.drop(h)).squeeze(-1)
        return HeadOutput(logits=unpack(logits, mask), embeddings=h, mask=mask)
