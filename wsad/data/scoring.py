"""Segment scores of whole videos, in packed batches of bounded size."""
from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import torch

from ..store.format import FeatureStore
from .cache import ArrayCache
from .chunks import chunks_to_segments, resample_chunks
from .standardize import Standardizer

MAX_SEGMENTS = 16384


@torch.no_grad()
def score_videos(model: torch.nn.Module, store: FeatureStore, videos: list[str],
                 std: Standardizer, chunks: int | None, max_segments: int = MAX_SEGMENTS,
                 cache: ArrayCache | None = None, others: Sequence[torch.nn.Module] = ()
                 ) -> dict[str, np.ndarray]:
    """Segment scores per video (mean over views), in eval mode. With ``others`` (further
    models of one run, :mod:`wsad.train.members`), the mean over all the models, each video
    read and prepared once for them all.

    Videos are read lazily and scored in packed batches of up to
    ``max_segments`` real segments (no padding is computed), so memory stays
    bounded. With ``chunks`` each view is resampled to that many chunks and
    the chunk scores are mapped back to the video's segments. ``cache`` keeps
    prepared arrays between calls (the per-epoch evaluation) within its budget.

    Returns:
        ``{video: scores [T]}`` in the order of ``videos``.
    """
    models = [model, *others]
    was_training = [m.training for m in models]
    for m in models:
        m.eval()
    out: dict[str, np.ndarray] = {}

    def prepare(v: str) -> np.ndarray:
        x = cache.get(("eval", v)) if cache is not None else None
        if x is not None:
            return x
        x = std(store.views(v))                      # [V, T, D]
        if chunks:
            x = np.stack([resample_chunks(view, chunks) for view in x])
        if cache is not None:
            cache.put(("eval", v), x)
        return x

    def flush(group: list[tuple[str, np.ndarray]]) -> None:
        lengths = np.array([a.shape[1] for _, a in group for _ in range(len(a))])
        x = np.concatenate([a.reshape(-1, store.dim) for _, a in group])
        mask = np.arange(lengths.max())[None, :] < lengths[:, None]
        x, mask = torch.from_numpy(x), torch.from_numpy(mask)
        s = model(x, mask).scores.numpy()
        if others:
            s = np.mean([s, *(m(x, mask).scores.numpy() for m in others)], axis=0).astype(s.dtype)
        r = 0
        for v, a in group:
            sc = s[r:r + len(a), :a.shape[1]].mean(axis=0)
            r += len(a)
            out[v] = chunks_to_segments(sc, store.n_segments(v)) if chunks else sc

    group: list[tuple[str, np.ndarray]] = []
    rows = 0
    for v in sorted(videos, key=store.n_segments):
        a = prepare(v)
        if group and rows + a.size // store.dim > max_segments:
            flush(group)
            group, rows = [], 0
        group.append((v, a))
        rows += a.size // store.dim
    if group:
        flush(group)
    for m, mode in zip(models, was_training):
        m.train(mode)
    return {v: out[v] for v in videos}
