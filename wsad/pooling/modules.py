"""Pooling as components: built from ``conf/pooling/<name>.yaml`` when the model
is built, each checks that the head gives what it needs, then maps a
:class:`~wsad.heads.HeadOutput` and the mask to bag scores [B] in (0, 1)."""
from __future__ import annotations

import torch
from torch import nn

from ..errors import WsadError
from ..heads.base import HeadOutput
from . import functional as F


class Pooling:
    """Base class: ``check(head)`` at build time, ``__call__(out, mask)`` per batch."""

    def check(self, head: nn.Module) -> None:
        """Raise a one-line :class:`WsadError` when ``head`` cannot feed this pooling."""

    def __call__(self, out: HeadOutput, mask: torch.Tensor) -> torch.Tensor:
        raise NotImplementedError


class MaxPooling(Pooling):
    """S = max_t s_t (the MIL ranking paper's bag score; Sultani et al., CVPR 2018)."""

    def __call__(self, out, mask):
        return F.masked_max(out.scores, mask)


class TopKPooling(Pooling):
    """S = mean of the k highest segment scores; ``k=None``: k = floor(T/16) + 1 per bag
    (from memory of published top-k MIL practice)."""

    def __init__(self, k: int | None = None):
        if k is not None and int(k) < 1:
            raise WsadError(f"pooling.k={k}; use a positive k or null (floor(T/16) + 1)")
        self.k = None if k is None else int(k)

    def __call__(self, out, mask):
        return F.topk_mean(out.scores, mask, self.k)


class MeanPooling(Pooling):
    """S = mean_t s_t (common practice; a baseline that dilutes short events)."""

    def __call__(self, out, mask):
        return F.masked_mean(out.scores, mask)


class AttentionPooling(Pooling):
    """The head's own bag score sigmoid(g(z)) when it gives one (gated attention,
    Ilse et al., ICML 2018), else S = sum_t a_t s_t with the head's attention."""

    def check(self, head):
        if not getattr(head, "gives_attention", False):
            raise WsadError(f"pooling=attention needs a head that gives attention "
                            f"(head=gated_attention); {type(head).__name__} gives none")

    def __call__(self, out, mask):
        if out.bag_logits is not None:
            return torch.sigmoid(out.bag_logits)
        return F.attention_weighted(out.scores, out.attention)
