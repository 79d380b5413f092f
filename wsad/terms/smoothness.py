"""Temporal smoothness of segment scores (Sultani, Chen & Shah, CVPR 2018)."""
from __future__ import annotations

import torch

from .base import Term, TermInputs, bag_rows, check_bag_set, mean_or_zero


def smoothness(scores: torch.Tensor, mask: torch.Tensor, rows: torch.Tensor) -> torch.Tensor:
    """L = mean over the chosen bags of sum_t (s_t - s_{t+1})^2 over consecutive real segments.

    Shape: scores, mask [B, T]; rows [B] bool (the bags it applies to) -> scalar.
    """
    both = mask[:, 1:] & mask[:, :-1]
    d2 = (scores[:, 1:] - scores[:, :-1]) ** 2 * both
    return mean_or_zero(d2.sum(dim=1)[rows], scores)


class Smoothness(Term):
    """The paper applies it to the anomalous bag (``on=anomalous``); ``on=all``
    applies it to every bag."""

    def __init__(self, on: str = "all"):
        self.on = check_bag_set(on, "smoothness")

    def __call__(self, inp: TermInputs) -> torch.Tensor:
        return smoothness(inp.scores, inp.mask, bag_rows(inp.y, self.on))
