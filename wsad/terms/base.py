"""The one signature all terms share."""
from __future__ import annotations

from dataclasses import dataclass

import torch


@dataclass
class TermInputs:
    scores: torch.Tensor        # [B, T] segment scores in (0, 1)
    logits: torch.Tensor        # [B, T]
    mask: torch.Tensor          # [B, T] True = real segment
    y: torch.Tensor             # [B] video labels (0/1)
    bag_scores: torch.Tensor    # [B] pooled scores
    _embeddings: object         # [B, T, H], or a function giving them (built only if a term asks)
    pairs: torch.Tensor | None  # [P, 2] (anomalous row, normal row) or None
    _packed: object = None      # [N, H] embeddings of real segments only, or a function giving them

    @property
    def embeddings(self) -> torch.Tensor:
        if callable(self._embeddings):
            self._embeddings = self._embeddings()
        return self._embeddings

    @property
    def packed_embeddings(self) -> torch.Tensor:
        """[N, H]: the real segments' embeddings, bag 0 first (no padding)."""
        if callable(self._packed):
            self._packed = self._packed()
        if self._packed is None:
            self._packed = self.embeddings[self.mask]
        return self._packed


def bag_rows(inp: TermInputs, on: str) -> torch.Tensor:
    """Boolean [B]: the bags a per-bag term applies to (``anomalous`` or ``all``)."""
    if on == "all":
        return torch.ones_like(inp.y, dtype=torch.bool)
    if on == "anomalous":
        return inp.y > 0.5
    from ..errors import WsadError
    raise WsadError(f"term option on={on!r}; use 'anomalous' or 'all'")
