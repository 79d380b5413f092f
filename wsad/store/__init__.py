"""The feature store: ``store.json``, ``manifest.csv``, ``events.csv`` and
``features/*.npy`` (see DESIGN.md). Read through memory maps, validated in
full by :func:`check_store`, built from one's own arrays by :func:`build_store`.
"""
from .format import FeatureStore, expected_segments, MANIFEST_COLUMNS, EVENT_COLUMNS
from .validate import Problem, check_store, summarize
from .fingerprint import store_fingerprint
from .index import build_store

__all__ = ["FeatureStore", "expected_segments", "MANIFEST_COLUMNS", "EVENT_COLUMNS",
           "Problem", "check_store", "summarize", "store_fingerprint", "build_store"]
