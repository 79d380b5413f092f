"""Feature-magnitude separation (Tian et al., ICCV 2021)."""
from __future__ import annotations

import torch
import torch.nn.functional as F

from ..errors import WsadError
from .base import Term, TermInputs


def top_magnitude(norms: torch.Tensor, mask: torch.Tensor, k: int) -> torch.Tensor:
    """Boolean [B, T]: the min(k, T_b) real segments of each bag with the largest norm."""
    lengths = mask.sum(1)
    kk = torch.minimum(torch.full_like(lengths, int(k)), lengths).clamp(min=1)
    order = norms.masked_fill(~mask, float("-inf")).argsort(dim=1, descending=True, stable=True)
    rank = torch.empty_like(order)
    rank.scatter_(1, order, torch.arange(mask.shape[1], device=mask.device).expand_as(order))
    return (rank < kk[:, None]) & mask


def magnitude_separation(embeddings: torch.Tensor, scores: torch.Tensor, mask: torch.Tensor, y: torch.Tensor,
                         k: int = 3, margin: float = 100.0, bce_weight: float = 1.0) -> torch.Tensor:
    """With g_b = mean of the k largest segment-embedding L2 norms ||h_bt|| of bag b
    (the selected segments S_b) and c_b = mean of the scores s_bt over S_b:

        L = mean_{a anomalous} max(0, m - g_a) + mean_{n normal} g_n
            + w * BCE(c, y)

    The first two parts are the pairwise hinge max(0, m - g_a) + g_n averaged over
    every (anomalous, normal) pair of the batch (it separates into the two means);
    a batch without one of the classes contributes the part it has.

    Shape: embeddings [B, T, H] (zeros on padding), scores and mask [B, T], y [B] -> scalar.
    """
    norms = embeddings.norm(dim=-1)
    top = top_magnitude(norms.detach(), mask, k).to(norms.dtype)
    n_top = top.sum(1)
    g = (norms * top).sum(1) / n_top
    c = (scores * top).sum(1) / n_top
    anom, normal = y > 0.5, y <= 0.5
    sep = torch.relu(margin - g[anom]).mean() if anom.any() else g.sum() * 0.0
    sep = sep + (g[normal].mean() if normal.any() else g.sum() * 0.0)
    return sep + bce_weight * F.binary_cross_entropy(c, y)


class MagnitudeSeparation(Term):
    """Anomalous bags should have some segments with large feature magnitude, normal
    bags none (Tian, Pang, Chen, Singh, Verjans & Carneiro, ICCV 2021); the scores of
    the selected segments are trained with BCE against the video label. Defaults k = 3,
    margin m = 100 (from memory of the paper, which uses 2048-d backbone features; our
    embeddings are the head's first hidden layer)."""

    def __init__(self, k: int = 3, margin: float = 100.0, bce_weight: float = 1.0):
        if int(k) < 1 or float(margin) <= 0 or float(bce_weight) < 0:
            raise WsadError(f"terms.magnitude: k={k} (>= 1), margin={margin} (> 0), bce_weight={bce_weight} (>= 0)")
        self.k, self.margin, self.bce_weight = int(k), float(margin), float(bce_weight)

    def __call__(self, inp: TermInputs) -> torch.Tensor:
        return magnitude_separation(inp.embeddings, inp.scores, inp.mask, inp.y, self.k, self.margin,
                                    self.bce_weight)
