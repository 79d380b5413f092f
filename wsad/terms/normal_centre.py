"""Centre loss on normal videos (Wan et al., ICME 2020)."""
from __future__ import annotations

import torch

from .base import Term, TermInputs


def normal_centre(scores: torch.Tensor, mask: torch.Tensor, y: torch.Tensor) -> torch.Tensor:
    """L = mean over normal bags b of (1/T_b) sum_t (s_bt - mean_t s_bt)^2: the scores
    of a normal video pulled towards their own mean (their variance), over real segments.

    Shape: scores, mask [B, T], y [B] -> scalar (0, attached, without normal bags).
    """
    m = mask.to(scores.dtype)
    n = m.sum(1)
    centre = (scores * m).sum(1) / n
    var = (((scores - centre[:, None]) ** 2) * m).sum(1) / n
    normal = y <= 0.5
    return var[normal].mean() if normal.any() else scores.sum() * 0.0


class NormalCentre(Term):
    """Normal videos should score evenly: the variance of segment scores within each
    normal bag (the centre loss of Wan, Fang, Xu, Chen & Chen, ICME 2020, on scores)."""

    def __call__(self, inp: TermInputs) -> torch.Tensor:
        return normal_centre(inp.scores, inp.mask, inp.y)
