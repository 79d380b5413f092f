"""Bag scores from segment scores, aware of the padding mask (functional forms).

Every function takes ``s`` [B, T] segment scores and ``mask`` [B, T] (True =
real segment) and returns [B] bag scores.
"""
from __future__ import annotations

import torch

#: k = floor(T / TOPK_SPAN) + 1 by default (from memory of published top-k MIL practice).
TOPK_SPAN = 16


def masked_max(s: torch.Tensor, mask: torch.Tensor) -> torch.Tensor:
    """S_b = max over real t of s_bt."""
    return s.masked_fill(~mask, float("-inf")).max(dim=1).values


def default_k(lengths: torch.Tensor) -> torch.Tensor:
    """k = floor(T / 16) + 1 per bag of T real segments."""
    return lengths // TOPK_SPAN + 1


def topk_mean(s: torch.Tensor, mask: torch.Tensor, k: int | None = None) -> torch.Tensor:
    """S_b = mean of the k highest real scores of bag b (k capped at the bag's
    length; ``k=None`` takes :func:`default_k`)."""
    lengths = mask.sum(dim=1)
    kk = default_k(lengths) if k is None else torch.full_like(lengths, int(k))
    kk = torch.minimum(kk, lengths).clamp(min=1)
    srt = s.masked_fill(~mask, float("-inf")).sort(dim=1, descending=True).values
    take = torch.arange(s.shape[1], device=s.device)[None, :] < kk[:, None]
    return torch.where(take, srt, torch.zeros_like(srt)).sum(dim=1) / kk


def masked_mean(s: torch.Tensor, mask: torch.Tensor) -> torch.Tensor:
    """S_b = mean over real t of s_bt."""
    m = mask.to(s.dtype)
    return (s * m).sum(dim=1) / m.sum(dim=1)


def attention_weighted(s: torch.Tensor, attention: torch.Tensor) -> torch.Tensor:
    """S_b = sum_t a_bt s_bt, with attention a summing to 1 over real segments."""
    return (attention * s).sum(dim=1)
