"""The MIL ranking hinge (Sultani, Chen & Shah, CVPR 2018)."""
import torch

from ..pooling import masked_max
from .base import TermInputs


class RankingHinge:
    """L = (1/P) sum_(a, n) max(0, m - max_i s(a_i) + max_i s(n_i)), margin m = 1 in the
    paper. Pairs are the batch's (anomalous, normal) pairs; a batch without
    pairs compares every anomalous bag with every normal bag."""

    def __init__(self, margin: float = 1.0):
        self.margin = float(margin)

    def __call__(self, inp: TermInputs):
        top = masked_max(inp.scores, inp.mask)
        if inp.pairs is not None:
            a, n = top[inp.pairs[:, 0]], top[inp.pairs[:, 1]]
        else:
            pos, neg = top[inp.y > 0.5], top[inp.y <= 0.5]
            if len(pos) == 0 or len(neg) == 0:
                return top.sum() * 0.0
            a, n = pos[:, None].expand(-1, len(neg)), neg[None, :].expand(len(pos), -1)
        return torch.relu(self.margin - a + n).mean()
