"""Segment-level binary cross-entropy against the video label."""
import torch.nn.functional as F

from .base import TermInputs


class VideoBCE:
    """L = -(1/N) sum_{b,t real} [ y_b log s_bt + (1 - y_b) log(1 - s_bt) ]:
    every segment regressed to its video's label (common practice, the simplest
    weak-label baseline; used with shuffled windows)."""

    def __call__(self, inp: TermInputs):
        target = inp.y[:, None].expand_as(inp.logits)
        return F.binary_cross_entropy_with_logits(inp.logits[inp.mask], target[inp.mask])
