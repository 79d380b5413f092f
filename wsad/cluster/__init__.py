"""Clustering kernels used by objective terms (k = 2 k-means per bag)."""
from .two_means import count_sketch, two_means

__all__ = ["count_sketch", "two_means"]
