"""Bags resampled to a fixed number of chunks, and chunk scores mapped back to segments."""
from __future__ import annotations

import numpy as np


def chunk_bounds(n_segments: int, n_chunks: int) -> np.ndarray:
    """Boundaries b_0..b_C of C equal spans over T segments (chunk i = [b_i, b_{i+1}))."""
    return np.linspace(0, n_segments, n_chunks + 1).round().astype(np.int64)


def chunk_of_segment(n_segments: int, n_chunks: int) -> np.ndarray:
    """For each segment, the (non-empty) chunk whose span contains it."""
    b = chunk_bounds(n_segments, n_chunks)
    return np.searchsorted(b[1:], np.arange(n_segments), side="right")


def chunks_to_segments(chunk_scores: np.ndarray, n_segments: int) -> np.ndarray:
    """Scores of a bag resampled to C chunks, mapped back to its T segments."""
    return np.asarray(chunk_scores)[chunk_of_segment(n_segments, len(chunk_scores))]


def resample_chunks(x: np.ndarray, n_chunks: int) -> np.ndarray:
    """[T, D] -> [C, D] by averaging C equal spans of segments; a span that is
    empty (T < C) takes the segment at its start (common practice)."""
    t = len(x)
    b = chunk_bounds(t, n_chunks)
    csum = np.concatenate([np.zeros((1, x.shape[1]), np.float64), np.cumsum(x, axis=0, dtype=np.float64)])
    lo, hi = b[:-1], b[1:]
    out = (csum[hi] - csum[lo]) / np.maximum(hi - lo, 1)[:, None]
    empty = hi == lo
    out[empty] = x[np.minimum(lo[empty], t - 1)]
    return out.astype(np.float32)
