"""The feature store: ``store.json``, ``manifest.csv``, ``events.csv`` and
``features/*.npy`` (see DESIGN.md). Read through memory maps, validated in
full by :func:`check_store`, built from one's own arrays by :func:`build_store`.
"""
from .fingerprint import store_fingerprint
from .format import EVENT_COLUMNS, MANIFEST_COLUMNS, SEGMENT_FRAMES, FeatureStore, expected_segments, segments_to_frames
from .index import build_store
from .validate import Problem, check_store, summarize

__all__ = ["FeatureStore", "expected_segments", "segments_to_frames", "SEGMENT_FRAMES",
           "MANIFEST_COLUMNS", "EVENT_COLUMNS",
           "Problem", "check_store", "summarize", "store_fingerprint", "build_store"]
