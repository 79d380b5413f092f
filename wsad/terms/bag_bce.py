"""Bag-level binary cross-entropy of the pooled score."""
from __future__ import annotations

import torch
import torch.nn.functional as F

from .base import Term, TermInputs

EPS = 1e-6


def bag_bce(bag_scores: torch.Tensor, y: torch.Tensor) -> torch.Tensor:
    """L = -(1/B) sum_b [ y_b log S_b + (1 - y_b) log(1 - S_b) ], S clamped to [1e-6, 1 - 1e-6].

    Shape: bag_scores [B] in (0, 1), y [B] -> scalar.
    """
    return F.binary_cross_entropy(bag_scores.clamp(EPS, 1 - EPS), y)


class BagBCE(Term):
    """Binary cross-entropy of the pooled bag score against the video label; with
    top-k pooling this is top-k MIL (the bag score is the mean of its k highest
    segment scores; from memory of published top-k MIL practice)."""

    def __call__(self, inp: TermInputs) -> torch.Tensor:
        return bag_bce(inp.bag_scores, inp.y)
