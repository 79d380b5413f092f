"""Segment scorers. Every head maps ``x`` (packed [N, D] real segments, or
padded [B, T, D]; see :mod:`wsad.data.layout`) and ``mask`` [B, T] to a
:class:`HeadOutput`: segment logits, segment embeddings (first hidden layer)
and optional attention weights. One module per family; the YAML in
``conf/head/`` names the constructor with ``_target_``; the constructor
receives ``in_dim`` from the store."""
from .base import Dropout, HeadOutput, check_sizes, mlp_layers
from .dilated import DilatedConvHead
from .gated_attention import GatedAttentionHead
from .mlp import MLPHead
from .self_attention import SelfAttentionHead
from .temporal import TemporalConvHead

__all__ = ["Dropout", "HeadOutput", "check_sizes", "mlp_layers", "DilatedConvHead", "GatedAttentionHead",
           "MLPHead", "SelfAttentionHead", "TemporalConvHead"]
