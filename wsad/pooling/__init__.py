"""Segment scores -> bag score: functional forms (:mod:`.functional`) and the
components the config builds (:mod:`.modules`; one YAML each in ``conf/pooling/``)."""
from .functional import default_k, masked_max, masked_mean, topk_mean
from .modules import AttentionPooling, MaxPooling, MeanPooling, Pooling, TopKPooling

__all__ = ["default_k", "masked_max", "masked_mean", "topk_mean", "AttentionPooling",
           "MaxPooling", "MeanPooling", "Pooling", "TopKPooling"]
