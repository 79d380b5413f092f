"""The one signature all terms share.

A term is built from ``conf/terms/<name>.yaml`` (its settings; the weight is
``objective.<name>``), validates those settings in ``__init__``, and is
called with one :class:`TermInputs` per batch, returning a scalar tensor. Its
math lives in a functional form beside it, which the tests call directly.
"""
from __future__ import annotations

from dataclasses import dataclass

import torch

from ..errors import WsadError
from ..heads.base import HeadOutput

BAG_SETS = ("anomalous", "all")


@dataclass
class TermInputs:
    """One batch as the terms see it.

    Args:
        out: the head's output (``logits`` [B, T], embeddings in both layouts, ``mask`` [B, T]).
        scores: [B, T] segment scores sigmoid(logits), computed once for all terms.
        y: [B] video labels (0/1).
        bag_scores: [B] pooled bag scores.
        pairs: [P, 2] (anomalous row, normal row), or None.
        targets: [B, T] segment labels (1, 0, -1 = none), or None.
    """

    out: HeadOutput
    scores: torch.Tensor
    y: torch.Tensor
    bag_scores: torch.Tensor | None = None
    pairs: torch.Tensor | None = None
    targets: torch.Tensor | None = None

    @classmethod
    def of(cls, out: HeadOutput, y: torch.Tensor, bag_scores: torch.Tensor | None,
           pairs: torch.Tensor | None = None, targets: torch.Tensor | None = None) -> TermInputs:
        return cls(out, out.scores, y, bag_scores, pairs, targets)

    @property
    def mask(self) -> torch.Tensor:
        return self.out.mask

    @property
    def logits(self) -> torch.Tensor:
        return self.out.logits

    @property
    def embeddings(self) -> torch.Tensor:
        """[B, T, H], zeros on padding (built on first use)."""
        return self.out.embeddings

    @property
    def packed_embeddings(self) -> torch.Tensor:
        """[N, H]: the real segments' embeddings, bag 0 first (no padding)."""
        return self.out.packed_embeddings


class Term:
    """Base class of objective terms: ``term(inp) -> scalar tensor``. ``needs_targets``:
    the term reads segment targets, so only bag constructions that give them fit it."""

    needs_targets: bool = False

    def __call__(self, inp: TermInputs) -> torch.Tensor:
        raise NotImplementedError


def check_bag_set(on: str, term: str) -> str:
    """A per-bag term's ``on`` option (``anomalous`` or ``all``), checked when built."""
    if on not in BAG_SETS:
        raise WsadError(f"terms.{term}.on={on!r}; use one of {list(BAG_SETS)}")
    return on


def bag_rows(y: torch.Tensor, on: str) -> torch.Tensor:
    """Boolean [B]: the bags a per-bag term applies to."""
    return torch.ones_like(y, dtype=torch.bool) if on == "all" else y > 0.5


def mean_or_zero(per_bag: torch.Tensor, like: torch.Tensor) -> torch.Tensor:
    """Mean of a per-bag loss; 0 (still attached to the graph) when no bag applies."""
    return per_bag.mean() if len(per_bag) else like.sum() * 0.0
