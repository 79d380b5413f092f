"""What every head returns, and the scorer stack they share."""
from __future__ import annotations

from dataclasses import dataclass

import torch
from torch import nn


@dataclass
class HeadOutput:
    logits: torch.Tensor               # [B, T]
    embeddings: torch.Tensor           # [B, T, H] first hidden layer
    attention: torch.Tensor | None = None   # [B, T], sums to 1 over real segments
    bag_logits: torch.Tensor | None = None  # [B] when the head scores the bag itself

    @property
    def scores(self) -> torch.Tensor:
        return torch.sigmoid(self.logits)


def mlp_layers(sizes: list[int], dropout: float) -> nn.Sequential:
    """Linear-ReLU-Dropout blocks between consecutive sizes, then Linear(., 1)."""
    layers: list[nn.Module] = []
    for a, b in zip(sizes[:-1], sizes[1:]):
        layers += [nn.Linear(a, b), nn.ReLU(), nn.Dropout(dropout)]
    layers.append(nn.Linear(sizes[-1], 1))
    return nn.Sequential(*layers)


def check_sizes(hidden) -> list[int]:
    from ..errors import WsadError

    hidden = [int(h) for h in hidden]
    if not hidden or min(hidden) < 1:
        raise WsadError(f"head.hidden={hidden}; give at least one positive layer size")
    return hidden


def unpack(flat: torch.Tensor, mask: torch.Tensor) -> torch.Tensor:
    """Scatter values of the real segments [N, ...] back to [B, T, ...] (zeros on padding)."""
    out = flat.new_zeros(mask.shape + flat.shape[1:])
    out[mask] = flat
    return out
