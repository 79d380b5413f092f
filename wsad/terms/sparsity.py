"""Sparsity of anomalous-bag scores (Sultani, Chen & Shah, CVPR 2018)."""
from .base import TermInputs, bag_rows


class Sparsity:
    """L = mean over anomalous bags of sum_t s_t (an anomaly occupies a small
    part of a video); ``per_segment=true`` uses the mean over the bag's
    segments instead of the sum, so long bags do not dominate."""

    def __init__(self, per_segment: bool = False, on: str = "anomalous"):
        self.per_segment, self.on = bool(per_segment), on

    def __call__(self, inp: TermInputs):
        rows = bag_rows(inp, self.on)
        m = inp.mask.to(inp.scores.dtype)
        total = (inp.scores * m).sum(dim=1)
        if self.per_segment:
            total = total / m.sum(dim=1)
        per_bag = total[rows]
        return per_bag.mean() if len(per_bag) else inp.scores.sum() * 0.0
