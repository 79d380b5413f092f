"""Data preparation shared by training and scoring: standardising, caching,
resampling to chunks, the two batch layouts, and the batching itself.

Nothing here knows about bag constructions, heads or terms; they build on it.
"""
from .batch import BagLoader, Batch, Item
from .cache import ArrayCache
from .chunks import chunk_bounds, chunk_of_segment, chunks_to_segments, resample_chunks
from .layout import padded, real_rows, unpack
from .scoring import score_videos
from .standardize import Standardizer

__all__ = ["Batch", "BagLoader", "Item", "ArrayCache", "chunk_bounds", "chunk_of_segment",
           "chunks_to_segments", "resample_chunks", "padded", "real_rows", "unpack",
           "score_videos", "Standardizer"]
