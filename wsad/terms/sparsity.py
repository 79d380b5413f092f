"""Sparsity of anomalous-bag scores (Sultani, Chen & Shah, CVPR 2018)."""
from __future__ import annotations

import torch

from .base import Term, TermInputs, bag_rows, check_bag_set, mean_or_zero


def sparsity(scores: torch.Tensor, mask: torch.Tensor, rows: torch.Tensor,
             per_segment: bool = False) -> torch.Tensor:
    """L = mean over the chosen bags of sum_t s_t (or of mean_t s_t with ``per_segment``).

    Shape: scores, mask [B, T]; rows [B] bool -> scalar.
    """
    m = mask.to(scores.dtype)
    total = (scores * m).sum(dim=1)
    if per_segment:
        total = total / m.sum(dim=1)
    return mean_or_zero(total[rows], scores)


class Sparsity(Term):
    """An anomaly occupies a small part of a video; ``per_segment=true`` uses the
    mean over the bag's segments instead of the sum, so long bags do not dominate."""

    def __init__(self, per_segment: bool = False, on: str = "anomalous"):
        self.per_segment, self.on = bool(per_segment), check_bag_set(on, "sparsity")

    def __call__(self, inp: TermInputs) -> torch.Tensor:
        return sparsity(inp.scores, inp.mask, bag_rows(inp.y, self.on), self.per_segment)
