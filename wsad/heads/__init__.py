"""Segment scorers. Every head maps ``x`` (packed [N, D] real segments, or
padded [B, T, D]; see :mod:`wsad.heads.base`) and ``mask`` [B, T] to a
:class:`HeadOutput`: segment scores and logits, segment embeddings (first
hidden layer) and optional attention weights. One module per family; the
YAML in ``conf/head/`` names the constructor with ``_target_``."""
from .base import HeadOutput, mlp_layers
from .mlp import MLPHead
from .gated_attention import GatedAttentionHead
from .temporal import TemporalConvHead

__all__ = ["HeadOutput", "mlp_layers", "MLPHead", "GatedAttentionHead", "TemporalConvHead"]
