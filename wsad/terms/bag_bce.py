"""Bag-level binary cross-entropy of the pooled score."""
from __future__ import annotations

import torch
import torch.nn.functional as F

from .base import Term, TermInputs


def bag_bce(bag_scores: torch.Tensor, y: torch.Tensor) -> torch.Tensor:
    """L = -(1/B) sum_b [ y_b log S_b + (1 - y_b) log(1 - S_b) ].

    PyTorch's own ``binary_cross_entropy``, with no clamp of S in front of it: a
    clamp would cut the gradient of a confidently wrong bag (S below the clamp on an
    anomalous bag) to zero, exactly where it is needed most; PyTorch bounds the
    log terms at -100 itself.

    Shape: bag_scores [B] in [0, 1], y [B] -> scalar.
    """
    return F.binary_cross_entropy(bag_scores, y)


class BagBCE(Term):
    """Binary cross-entropy of the pooled bag score against the video label; with
    top-k pooling this is top-k MIL (the bag score is the mean of its k highest
    segment scores; from memory of published top-k MIL practice)."""

    def __call__(self, inp: TermInputs) -> torch.Tensor:
        return bag_bce(inp.bag_scores, inp.y)
