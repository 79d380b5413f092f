"""Temporal smoothness of segment scores (Sultani, Chen & Shah, CVPR 2018)."""
from .base import TermInputs, bag_rows


class Smoothness:
    """L = mean over bags of sum_t (s_t - s_{t+1})^2, over consecutive real
    segments. The paper applies it to the anomalous bag (``on=anomalous``);
    ``on=all`` applies it to every bag."""

    def __init__(self, on: str = "all"):
        self.on = on

    def __call__(self, inp: TermInputs):
        rows = bag_rows(inp, self.on)
        both = inp.mask[:, 1:] & inp.mask[:, :-1]
        d2 = (inp.scores[:, 1:] - inp.scores[:, :-1]) ** 2 * both
        per_bag = d2.sum(dim=1)[rows]
        return per_bag.mean() if len(per_bag) else inp.scores.sum() * 0.0
