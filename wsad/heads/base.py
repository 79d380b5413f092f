"""What every head returns, the scorer stack they share, and the two batch layouts.

Batches reach a head as ``x`` plus ``mask`` [B, T] (True = real segment). ``x``
is either packed, [N, D] with N = mask.sum() (the real segments of bag 0, then
bag 1, ...: what the training loader and the scorer send, so no work is spent
on padding), or padded, [B, T, D]. :func:`real_rows` and :func:`padded` give a
head the layout it needs from either.
"""
from __future__ import annotations

import numpy as np
import torch
from torch import nn


class HeadOutput:
    """``logits`` [B, T]; ``embeddings`` [B, T, H] (the first hidden layer), given
    as a tensor or as packed rows [N, H] that are scattered to [B, T, H] only
    when a term asks for them; optional ``attention`` [B, T] (sums to 1 over
    real segments) and ``bag_logits`` [B] when the head scores the bag itself."""

    def __init__(self, logits: torch.Tensor, embeddings: torch.Tensor,
                 attention: torch.Tensor | None = None, bag_logits: torch.Tensor | None = None,
                 mask: torch.Tensor | None = None):
        self.logits, self.attention, self.bag_logits = logits, attention, bag_logits
        packed = mask is not None and embeddings.dim() == 2
        self._mask = mask
        self._packed = embeddings if packed else None          # [N, H] or None
        self._padded = None if packed else embeddings          # [B, T, H], built on first use

    @property
    def scores(self) -> torch.Tensor:
        return torch.sigmoid(self.logits)

    @property
    def embeddings(self) -> torch.Tensor:
        if self._padded is None:  # packed rows: scatter once
            self._padded = unpack(self._packed, self._mask)
        return self._padded

    @property
    def packed_embeddings(self) -> torch.Tensor | None:
        """[N, H] embeddings of the real segments only (bag 0 first), or None
        when the head gave them padded (:class:`TermInputs` then gathers them)."""
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
        from ..errors import WsadError

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


def mlp_layers(sizes: list[int], dropout: float) -> nn.Sequential:
    """Linear-ReLU-Dropout blocks between consecutive sizes, then Linear(., 1)."""
    layers: list[nn.Module] = []
    for a, b in zip(sizes[:-1], sizes[1:]):
        layers += [nn.Linear(a, b), nn.ReLU(), Dropout(dropout)]
    layers.append(nn.Linear(sizes[-1], 1))
    return nn.Sequential(*layers)


def check_sizes(hidden) -> list[int]:
    from ..errors import WsadError

    hidden = [int(h) for h in hidden]
    if not hidden or min(hidden) < 1:
        raise WsadError(f"head.hidden={hidden}; give at least one positive layer size")
    return hidden


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
