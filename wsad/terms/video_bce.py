"""Segment-level binary cross-entropy against the video label."""
from __future__ import annotations

import torch
import torch.nn.functional as F

from .base import Term, TermInputs


def video_bce(logits: torch.Tensor, mask: torch.Tensor, y: torch.Tensor) -> torch.Tensor:
    """L = -(1/N) sum_{b,t real} [ y_b log s_bt + (1 - y_b) log(1 - s_bt) ], s = sigmoid(logits).

    Shape: logits [B, T], mask [B, T], y [B] -> scalar (mean over the N real segments).
    """
    target = y[:, None].expand_as(logits)
    return F.binary_cross_entropy_with_logits(logits[mask], target[mask])


class VideoBCE(Term):
    """Every segment regressed to its video's label (common practice, the simplest
    weak-label baseline; used with shuffled windows)."""

    def __call__(self, inp: TermInputs) -> torch.Tensor:
        return video_bce(inp.logits, inp.mask, inp.y)
