"""The MIL ranking hinge (Sultani, Chen & Shah, CVPR 2018)."""
from __future__ import annotations

import torch

from ..errors import WsadError
from ..pooling.functional import masked_max
from .base import Term, TermInputs


def ranking_hinge(scores: torch.Tensor, mask: torch.Tensor, y: torch.Tensor,
                  pairs: torch.Tensor | None, margin: float = 1.0) -> torch.Tensor:
    """L = (1/P) sum_(a, n) max(0, m - max_i s(a_i) + max_i s(n_i)).

    Pairs are the batch's (anomalous, normal) rows; without pairs every
    anomalous bag is compared with every normal bag (0 when one class is absent).

    Shape: scores, mask [B, T]; y [B]; pairs [P, 2] or None -> scalar.
    """
    top = masked_max(scores, mask)
    if pairs is not None:
        a, n = top[pairs[:, 0]], top[pairs[:, 1]]
    else:
        pos, neg = top[y > 0.5], top[y <= 0.5]
        if len(pos) == 0 or len(neg) == 0:
            return top.sum() * 0.0
        a, n = pos[:, None].expand(-1, len(neg)), neg[None, :].expand(len(pos), -1)
    return torch.relu(margin - a + n).mean()


class RankingHinge(Term):
    """The ranking hinge between anomalous and normal bag maxima, margin m = 1 in the paper."""

    def __init__(self, margin: float = 1.0):
        if float(margin) <= 0:
            raise WsadError(f"terms.ranking_hinge.margin={margin}; use a positive margin")
        self.margin = float(margin)

    def __call__(self, inp: TermInputs) -> torch.Tensor:
        return ranking_hinge(inp.scores, inp.mask, inp.y, inp.pairs, self.margin)
