"""Bag-level binary cross-entropy of the pooled score."""
import torch.nn.functional as F

from .base import TermInputs

EPS = 1e-6


class BagBCE:
    """L = -(1/B) sum_b [ y_b log S_b + (1 - y_b) log(1 - S_b) ] with S_b the
    pooled bag score; with top-k pooling this is top-k MIL (the bag score is
    the mean of its k highest segment scores; from memory of published top-k
    MIL practice)."""

    def __call__(self, inp: TermInputs):
        return F.binary_cross_entropy(inp.bag_scores.clamp(EPS, 1 - EPS), inp.y)
