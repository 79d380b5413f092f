"""Objective terms, one small module each. Every term is called with one
:class:`TermInputs` and returns a scalar tensor; the objective is the sum of
the terms weighted by ``objective.<name>`` (0 disables a term)."""
from .base import TermInputs
from .video_bce import VideoBCE
from .bag_bce import BagBCE
from .ranking_hinge import RankingHinge
from .smoothness import Smoothness
from .sparsity import Sparsity
from .cluster_distance import ClusterDistance, two_means

__all__ = ["TermInputs", "VideoBCE", "BagBCE", "RankingHinge", "Smoothness", "Sparsity",
           "ClusterDistance", "two_means"]
