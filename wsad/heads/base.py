"""What every head returns, and the parts heads share (dropout, the scorer stack).

A head is an ``nn.Module`` with ``forward(x, mask) -> HeadOutput``; ``x`` comes
packed or padded (see :mod:`wsad.data.layout`), ``mask`` is [B, T].
"""
from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import torch
from torch import nn

from ..data.layout import unpack
from ..errors import WsadError


class HeadOutput:
    """A head's output for a batch of B bags of up to T segments.

    Args:
        logits: [B, T] segment logits (any value on padding).
        embeddings: the segment embeddings (the first hidden layer), either
            packed rows [N, H] of the real segments or padded [B, T, H].
        mask: [B, T], True = real segment.
        attention: optional [B, T] weights summing to 1 over real segments.
        bag_logits: optional [B], when the head scores the bag itself.

    Both embedding layouts are available (``embeddings`` padded,
    ``packed_embeddings`` packed); the one the head did not give is built on
    first use only, so a step whose terms need neither pays for neither.
    """

    def __init__(self, logits: torch.Tensor, embeddings: torch.Tensor, mask: torch.Tensor,
                 attention: torch.Tensor | None = None, bag_logits: torch.Tensor | None = None):
        self.logits, self.mask, self.attention, self.bag_logits = logits, mask, attention, bag_logits
        packed = embeddings.dim() == 2
        self._packed = embeddings if packed else None
        self._padded = None if packed else embeddings

    @property
    def scores(self) -> torch.Tensor:
        """[B, T] segment scores sigmoid(logits)."""
        return torch.sigmoid(self.logits)

    @property
    def embeddings(self) -> torch.Tensor:
        """[B, T, H] segment embeddings, zeros on padding."""
        if self._padded is None:
            self._padded = unpack(self._packed, self.mask)
        return self._padded

    @property
    def packed_embeddings(self) -> torch.Tensor:
        """[N, H] embeddings of the real segments only, bag 0 first."""
        if self._packed is None:
            self._packed = self._padded[self.mask]
        return self._packed


class Dropout(nn.Module):
    """Inverted dropout (Srivastava et al., JMLR 2014): in training, each value is
    kept with probability q = 1 - p and scaled by 1/q; in eval mode, identity.

    Same contract as ``torch.nn.Dropout``, with a cheaper mask: 16 random bits
    per value from numpy's PCG64 (q is exact to 2^-16 and the scale uses the
    realised q, so E[out] = x), seeded by one draw from torch's generator so
    runs stay reproducible and resumable from torch's RNG state. On 2 cores
    ``bernoulli_`` cost a quarter of an MLP step; this costs a few percent.
    """

    def __init__(self, p: float = 0.5):
        super().__init__()
        if not 0.0 <= float(p) < 1.0:
            raise WsadError(f"dropout={p}; use a probability in [0, 1)")
        self.p = float(p)
        self.threshold = int(round(self.p * 65536))
        self.scale = 65536.0 / (65536 - self.threshold)

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        if not self.training or self.threshold == 0:
            return x
        seed = int(torch.randint(0, 2 ** 62, (1,)))
        bits = np.random.default_rng(seed).integers(0, 65536, size=x.shape, dtype=np.uint16)
        keep = torch.from_numpy(bits >= self.threshold).to(x.dtype).mul_(self.scale)
        return x * keep

    def extra_repr(self) -> str:
        return f"p={self.p}"


def mlp_layers(sizes: Sequence[int], dropout: float) -> nn.Sequential:
    """Linear-ReLU-Dropout blocks between consecutive sizes, then Linear(., 1)."""
    layers: list[nn.Module] = []
    for a, b in zip(sizes[:-1], sizes[1:]):
        layers += [nn.Linear(a, b), nn.ReLU(), Dropout(dropout)]
    layers.append(nn.Linear(sizes[-1], 1))
    return nn.Sequential(*layers)


def check_sizes(hidden: Sequence[int]) -> list[int]:
    """``head.hidden`` as a list of positive ints, or a one-line error."""
    hidden = [int(h) for h in hidden]
    if not hidden or min(hidden) < 1:
        raise WsadError(f"head.hidden={hidden}; give at least one positive layer size")
    return hidden
