"""A scorer: the one value that turns a store's videos into segment scores."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import torch

from ..store.format import FeatureStore
from .cache import ArrayCache
from .scoring import score_videos
from .standardize import Standardizer


@dataclass
class Scorer:
    """A trained head with what its inputs need: the standardiser fitted on the training
    segments and the chunk count bags were resampled to (None: segments as they are). A video's
    views (crops, as the store opens them) are scored each and averaged.

    ``others``: further models of the same run (:mod:`wsad.train.members`, same standardiser
    and chunks); a video's segment scores are then the mean over all the models.

    Built from a training setup (:meth:`wsad.train.Setup.scorer`) or a checkpoint
    (:func:`wsad.checkpoint.scorer_from_checkpoint`)."""

    model: torch.nn.Module
    std: Standardizer
    chunks: int | None = None
    others: list[torch.nn.Module] = field(default_factory=list)

    def __call__(self, store: FeatureStore, videos: list[str], cache: ArrayCache | None = None
                 ) -> dict[str, np.ndarray]:
        """``{video: segment scores [T]}`` in the order of ``videos`` (see :func:`.score_videos`)."""
        return score_videos(self.model, store, videos, self.std, self.chunks, cache=cache, others=self.others)
