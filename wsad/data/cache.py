"""Prepared arrays kept in RAM up to a byte budget."""
from __future__ import annotations

from collections.abc import Hashable

import numpy as np

from ..errors import WsadError

DEFAULT_BUDGET_MB = 512.0


class ArrayCache:
    """Prepared arrays kept in RAM up to a byte budget (first come, first kept).
    One cache serves a run's training bags and its evaluation arrays, so
    ``data.cache_mb`` bounds both together."""

    def __init__(self, budget_mb: float = DEFAULT_BUDGET_MB):
        if budget_mb < 0:
            raise WsadError(f"data.cache_mb={budget_mb}; use 0 (no cache) or a positive size")
        self.budget, self.used = int(budget_mb * 2 ** 20), 0
        self.arrays: dict = {}

    def get(self, key: Hashable) -> np.ndarray | None:
        return self.arrays.get(key)

    def fits(self, nbytes: int) -> bool:
        return self.used + nbytes <= self.budget

    def put(self, key: Hashable, x: np.ndarray) -> None:
        if key not in self.arrays and self.fits(x.nbytes):
            self.arrays[key] = x
            self.used += x.nbytes
