"""Temporal self-attention over a bag's segments (Vaswani et al., NeurIPS 2017)."""
from __future__ import annotations

import math
from collections.abc import Sequence

import torch
from torch import nn

from ..data.layout import padded
from ..errors import WsadError
from .base import Dropout, HeadOutput, check_sizes, mlp_layers


def sinusoidal_positions(t: int, dim: int) -> torch.Tensor:
    """[T, dim] PE(t, 2i) = sin(t / 10000^(2i/dim)), PE(t, 2i+1) = cos(t / 10000^(2i/dim))."""
    pos = torch.arange(t, dtype=torch.float32)[:, None]
    freq = torch.exp(torch.arange(0, dim, 2, dtype=torch.float32) * (-math.log(10000.0) / dim))
    pe = torch.zeros(t, dim)
    pe[:, 0::2] = torch.sin(pos * freq)
    pe[:, 1::2] = torch.cos(pos * freq)[:, : dim // 2]
    return pe


def masked_self_attention(h: torch.Tensor, mask: torch.Tensor, w_in: torch.Tensor, b_in: torch.Tensor,
                          w_out: torch.Tensor, b_out: torch.Tensor, heads: int) -> torch.Tensor:
    """Multi-head scaled dot-product self-attention, keys restricted to real segments:
    Q, K, V = h W_q, h W_k, h W_v; A = softmax(Q K^T / sqrt(d) + mask) per head; out = concat(A V) W_o.

    Shape: h [B, T, E], mask [B, T] (True = real), w_in [3E, E], b_in [3E], w_out [E, E] -> [B, T, E].
    """
    b, t, e = h.shape
    d = e // heads
    q, k, v = (h @ w_in.T + b_in).split(e, dim=-1)
    q, k, v = (x.view(b, t, heads, d).transpose(1, 2) for x in (q, k, v))       # [B, heads, T, d]
    logits = q @ k.transpose(-1, -2) / math.sqrt(d)
    logits = logits.masked_fill(~mask[:, None, None, :], float("-inf"))
    out = torch.softmax(logits, dim=-1) @ v
    return out.transpose(1, 2).reshape(b, t, e) @ w_out.T + b_out


POSITIONS = ("none", "sinusoidal")


class SelfAttentionHead(nn.Module):
    """h = W x (+ PE, sinusoidal positions, with ``positions="sinusoidal"``); one post-norm
    transformer encoder layer, h = LN(h + MHSA(h)), h = LN(h + FFN(h)), with attention keys
    limited to the bag's real segments; then the MLP scorer on each h_t. Padding never
    reaches a real segment's output.

    Positions are off by default: in fixed-camera footage an event can start at any time, so
    a segment's absolute position carries no evidence, and with few training videos the head
    learned position instead of content. Measured (topk recipe, 30 epochs): on the open digits
    stream, instance AUC over seeds 0/1/2 was 0.628/0.892/0.856 with sinusoidal positions and
    0.948/0.965/0.939 without; on the warehouse demo store, frame AUC 0.632 with and 0.714 without.
    The encoder's published form (Vaswani et al.) is ``positions="sinusoidal"``.

    Shape:
        x: [N, D] packed or [B, T, D] padded; mask: [B, T]; logits [B, T], embeddings [B, T, H].
    """

    def __init__(self, in_dim: int, hidden: Sequence[int] = (128, 32), heads: int = 4, ffn: int = 256,
                 dropout: float = 0.3, positions: str = "none"):
        super().__init__()
        hidden = check_sizes(hidden)
        if int(heads) < 1 or hidden[0] % int(heads):
            raise WsadError(f"head.heads={heads}; it must divide head.hidden[0]={hidden[0]}")
        if positions not in POSITIONS:
            raise WsadError(f"head.positions={positions}; use one of {', '.join(POSITIONS)}")
        self.positions = positions
        self.heads = int(heads)
        e = hidden[0]
        self.embed = nn.Linear(in_dim, e)
        self.in_proj = nn.Linear(e, 3 * e)
        self.out_proj = nn.Linear(e, e)
        self.norm1, self.norm2 = nn.LayerNorm(e), nn.LayerNorm(e)
        self.ffn = nn.Sequential(nn.Linear(e, int(ffn)), nn.ReLU(), nn.Linear(int(ffn), e))
        self.drop = Dropout(dropout)
        self.score = mlp_layers(hidden, dropout)

    def forward(self, x: torch.Tensor, mask: torch.Tensor) -> HeadOutput:
        x = padded(x, mask)
        h = self.embed(x)
        if self.positions == "sinusoidal":
            h = h + sinusoidal_positions(x.shape[1], self.embed.out_features).to(x.dtype)
        att = masked_self_attention(h, mask, self.in_proj.weight, self.in_proj.bias, self.out_proj.weight,
                                    self.out_proj.bias, self.heads)
        h = self.norm1(h + self.drop(att))
        h = self.norm2(h + self.drop(self.ffn(h)))
        h = h * mask.unsqueeze(-1)
        return HeadOutput(logits=self.score(self.drop(h)).squeeze(-1), embeddings=h, mask=mask)
