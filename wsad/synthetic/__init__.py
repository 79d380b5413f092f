"""Synthetic correlated feature streams with known ground truth.

Scenario recipes live in the top-level ``synthetic/`` folder (one YAML each);
:func:`generate_store` writes a store in the DESIGN format.
"""
from .generator import Signatures, generate_store
from .measure import (
    anomalous_segment_share,
    camera_share,
    context_scores,
    lag1_autocorrelation,
    reference_metrics,
    signature_scores,
)
from .scenario import SCENARIO_DIR, load_scenario, scenario_names

__all__ = ["load_scenario", "scenario_names", "SCENARIO_DIR", "generate_store", "Signatures",
           "lag1_autocorrelation", "signature_scores", "context_scores", "reference_metrics",
           "anomalous_segment_share", "camera_share"]
