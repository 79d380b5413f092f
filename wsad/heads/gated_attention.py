"""Gated attention MIL pooling (Ilse, Tomczak & Welling, ICML 2018)."""
from __future__ import annotations

from collections.abc import Sequence

import torch
from torch import nn

from ..data.layout import real_rows, unpack
from .base import Dropout, HeadOutput, check_sizes, mlp_layers


class GatedAttentionHead(nn.Module):
    """h_t = ReLU(W x_t) (the embedding),
    a_t = softmax_t( w^T ( tanh(V h_t) * sigm(U h_t) ) ) over the bag's real segments,
    z = sum_t a_t h_t (the bag embedding).

    Segment logits come from a scorer g applied to each h_t; the bag logit is
    g(z), so attention pooling is the paper's embedding-level pooling.

    Shape:
        x: [N, D] packed or [B, T, D] padded; mask: [B, T]; logits and
        attention [B, T], embeddings [B, T, H], bag_logits [B].
    """

    gives_attention = True

    def __init__(self, in_dim: int, hidden: Sequence[int] = (128, 32), attention_dim: int = 64,
                 dropout: float = 0.3):
        super().__init__()
        hidden = check_sizes(hidden)
        self.embed = nn.Sequential(nn.Linear(in_dim, hidden[0]), nn.ReLU())
        self.V = nn.Linear(hidden[0], attention_dim)
        self.U = nn.Linear(hidden[0], attention_dim)
        self.w = nn.Linear(attention_dim, 1, bias=False)
        self.drop = Dropout(dropout)
        self.score = mlp_layers(hidden, dropout)

    def forward(self, x: torch.Tensor, mask: torch.Tensor) -> HeadOutput:
        flat = self.embed(real_rows(x, mask))                  # real segments only
        e = unpack(self.w(torch.tanh(self.V(flat)) * torch.sigmoid(self.U(flat))).squeeze(-1), mask)
        a = torch.softmax(e.masked_fill(~mask, float("-inf")), dim=1)
        h = unpack(flat, mask)
        z = (a.unsqueeze(-1) * h).sum(dim=1)
        logits = unpack(self.score(self.drop(flat)).squeeze(-1), mask)
        return HeadOutput(logits=logits, embeddings=h, mask=mask, attention=a,
                          bag_logits=self.score(self.drop(z)).squeeze(-1))
