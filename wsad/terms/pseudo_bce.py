"""Segment-level binary cross-entropy against pseudo labels."""
from __future__ import annotations

import torch
import torch.nn.functional as F

from .base import Term, TermInputs


def pseudo_bce(logits: torch.Tensor, targets: torch.Tensor) -> torch.Tensor:
    """L = -(1/N) sum_{t labelled} [ z_t log s_t + (1 - z_t) log(1 - s_t) ], s = sigmoid(logits),
    over the N segments whose target z_t is 0 or 1 (-1: no label, padding included).

    Shape: logits, targets [B, T] -> scalar (0, attached, when nothing is labelled).
    """
    sel = targets >= 0
    if not bool(sel.any()):
        return logits.sum() * 0.0
    return F.binary_cross_entropy_with_logits(logits[sel], targets[sel].to(logits.dtype))


class PseudoBCE(Term):
    """Each labelled segment regressed to its pseudo label: the second stage of
    self-training (Feng, Hong & Zheng, CVPR 2021; the idea of cleaning noisy segment
    labels, Zhong et al., CVPR 2019)."""

    needs_targets = True

    def __call__(self, inp: TermInputs) -> torch.Tensor:
        return pseudo_bce(inp.logits, inp.targets)
