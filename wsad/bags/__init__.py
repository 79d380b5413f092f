"""Bag constructions: how a video's segments become training units.

Each construction lists *items* (a span of one view of one video) and groups
them into batches per epoch; :class:`wsad.data.BagLoader` reads the items
from the store and packs them into a batch. One module per construction, one
YAML per construction in ``conf/bags/`` naming it with ``_target_``.
"""
from .base import BagConstruction, balanced_batches, video_items
from .pairs import AnomalousNormalPairs
from .whole import WholeVideo
from .windows import Windows

__all__ = ["BagConstruction", "balanced_batches", "video_items", "AnomalousNormalPairs",
           "WholeVideo", "Windows"]
