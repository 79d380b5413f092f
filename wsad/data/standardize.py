"""Per-dimension standardisation fitted on training segments."""
from __future__ import annotations

import warnings

import numpy as np
import torch

from ..store.format import FeatureStore


class Standardizer:
    """Per-dim (x - mean) / std fitted on training segments (streamed, float64).

    Applied as (x - mean) * (1 / std) in float32, the same arithmetic in
    training and scoring, so a bag gets the same numbers on either path.
    Without a mean and std it is the identity (``data.standardize=false``)."""

    def __init__(self, mean: np.ndarray | None = None, std: np.ndarray | None = None):
        self.mean, self.std = mean, std
        self.inv = None if std is None else (1.0 / std.astype(np.float64)).astype(np.float32)
        self._mean_t = None if mean is None else torch.from_numpy(mean)
        self._inv_t = None if std is None else torch.from_numpy(self.inv)

    @classmethod
    def fit(cls, store: FeatureStore, videos: list[str]) -> Standardizer:
        s = ss = None
        n = 0
        for v in videos:
            x = store.views(v).reshape(-1, store.dim).astype(np.float64)
            s = x.sum(0) if s is None else s + x.sum(0)
            ss = (x ** 2).sum(0) if ss is None else ss + (x ** 2).sum(0)
            n += len(x)
        mean = s / n
        std = np.sqrt(np.maximum(ss / n - mean ** 2, 1e-12))
        return cls(mean.astype(np.float32), std.astype(np.float32))

    def __call__(self, x: np.ndarray) -> np.ndarray:
        """A new float32 array (``x`` may be a read-only float16 memory map)."""
        out = np.empty(x.shape, np.float32)
        return self.into(x, out)

    def into(self, x: np.ndarray, out: np.ndarray) -> np.ndarray:
        """Standardise ``x`` (any float dtype) into the float32 array ``out``
        in place, no temporary. Torch does the float16 conversion and the
        arithmetic: several times faster than NumPy's on 2 cores."""
        t = torch.from_numpy(out)
        t.copy_(_readonly_tensor(x))
        if self.mean is not None:
            t.sub_(self._mean_t).mul_(self._inv_t)
        return out

    def state(self) -> dict:
        return {"mean": None if self.mean is None else torch.from_numpy(self.mean),
                "std": None if self.std is None else torch.from_numpy(self.std)}

    @classmethod
    def from_state(cls, state: dict) -> Standardizer:
        m, s = state.get("mean"), state.get("std")
        return cls(None if m is None else m.numpy(), None if s is None else s.numpy())


def _readonly_tensor(x: np.ndarray) -> torch.Tensor:
    """A tensor over ``x`` without a copy; read-only memory maps are only read here."""
    if x.flags.writeable:
        return torch.from_numpy(x)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # torch warns that it cannot protect them
        return torch.from_numpy(x)
