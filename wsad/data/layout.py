"""The two batch layouts and moving between them.

A batch is ``x`` plus ``mask`` [B, T] (True = real segment). ``x`` is either
packed, [N, D] with N = mask.sum() (the real segments of bag 0, then bag 1,
...: what the training loader and the scorer send, so no work is spent on
padding), or padded, [B, T, D].
"""
from __future__ import annotations

from collections.abc import Iterator

import torch


def real_rows(x: torch.Tensor, mask: torch.Tensor) -> torch.Tensor:
    """[N, D] features of the real segments, from a packed or a padded batch."""
    return x if x.dim() == 2 else x[mask]


def padded(x: torch.Tensor, mask: torch.Tensor) -> torch.Tensor:
    """[B, T, D] features with zeros on padding, from a packed or a padded batch."""
    return unpack(x, mask) if x.dim() == 2 else x * mask.unsqueeze(-1)


def unpack(flat: torch.Tensor, mask: torch.Tensor) -> torch.Tensor:
    """Scatter values of the real segments [N, ...] back to [B, T, ...] (zeros on padding)."""
    out = flat.new_zeros(mask.shape + flat.shape[1:])
    out[mask] = flat
    return out


def bag_blocks(mask: torch.Tensor, max_rows: int = 2048) -> Iterator[tuple[int, int, int, int]]:
    """Consecutive bags grouped up to ``max_rows`` segments (at least one bag):
    (first bag, last bag + 1, first row, last row + 1) of a packed batch. A
    block's product costs bags x rows, so a row budget keeps it near one pass
    whatever the lengths."""
    lengths = mask.sum(1).tolist()
    i, r0 = 0, 0
    while i < len(lengths):
        j, r1 = i + 1, r0 + lengths[i]
        while j < len(lengths) and r1 + lengths[j] <= max_rows:
            r1 += lengths[j]
            j += 1
        yield i, j, r0, r1
        i, r0 = j, r1


def equal_lengths(mask: torch.Tensor) -> bool:
    """True when every bag fills the mask (then packed rows are the padded block)."""
    return bool((mask.sum(1) == mask.shape[1]).all())
