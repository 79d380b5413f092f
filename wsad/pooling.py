"""Bag score from segment scores, aware of the padding mask."""
from __future__ import annotations

import torch

from .errors import WsadError
from .heads.base import HeadOutput

POOLINGS = ("max", "topk", "mean", "attention")


def masked_max(s: torch.Tensor, mask: torch.Tensor) -> torch.Tensor:
    return s.masked_fill(~mask, float("-inf")).max(dim=1).values


def default_k(lengths: torch.Tensor) -> torch.Tensor:
    """k = floor(T / 16) + 1 per bag (from memory of published top-k MIL practice)."""
    return lengths // 16 + 1


def topk_mean(s: torch.Tensor, mask: torch.Tensor, k: int | None = None) -> torch.Tensor:
    """Mean of the k highest real scores of each bag (k capped at the bag's length)."""
    lengths = mask.sum(dim=1)
    kk = default_k(lengths) if k is None else torch.full_like(lengths, int(k))
    kk = torch.minimum(kk, lengths).clamp(min=1)
    srt = s.masked_fill(~mask, float("-inf")).sort(dim=1, descending=True).values
    take = torch.arange(s.shape[1], device=s.device)[None, :] < kk[:, None]
    return torch.where(take, srt, torch.zeros_like(srt)).sum(dim=1) / kk


def pool(kind: str, out: HeadOutput, mask: torch.Tensor, k: int | None = None) -> torch.Tensor:
    """Bag scores [B] in (0, 1) from a head's output."""
    s = out.scores
    if kind == "max":
        return masked_max(s, mask)
    if kind == "topk":
        return topk_mean(s, mask, k)
    if kind == "mean":
        m = mask.to(s.dtype)
        return (s * m).sum(dim=1) / m.sum(dim=1)
    if kind == "attention":
        if out.bag_logits is not None:
            return torch.sigmoid(out.bag_logits)
        if out.attention is None:
            raise WsadError("pooling=attention needs a head that gives attention "
                            "(head=gated_attention)")
        return (out.attention * s).sum(dim=1)
    raise WsadError(f"pooling={kind!r} is not known; use one of {list(POOLINGS)}")
