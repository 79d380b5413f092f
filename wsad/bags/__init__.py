"""Bag constructions: how a video's segments become training units.

Each construction lists *items* (a span of one view of one video) and groups
them into batches per epoch; :class:`BagLoader` reads the items from the
store and pads them into a :class:`Batch`. One module per construction, one
YAML per construction in ``conf/bags/``.
"""
from .base import Batch, BagConstruction, Item, BagLoader, Standardizer, resample_chunks
from .whole import WholeVideo
from .pairs import AnomalousNormalPairs
from .windows import Windows

__all__ = ["Batch", "BagConstruction", "Item", "BagLoader", "Standardizer", "resample_chunks",
           "WholeVideo", "AnomalousNormalPairs", "Windows"]
