"""Synthetic correlated feature streams with known ground truth.

Scenario recipes live in the top-level ``synthetic/`` folder (one YAML each);
:func:`generate_store` writes a store in the DESIGN format.
"""
from .scenario import load_scenario, scenario_names, SCENARIO_DIR
from .generator import generate_store, Signatures
from .measure import (lag1_autocorrelation, oracle_scores, oracle_frame_auc,
                      anomalous_segment_share)

__all__ = ["load_scenario", "scenario_names", "SCENARIO_DIR", "generate_store", "Signatures",
           "lag1_autocorrelation", "oracle_scores", "oracle_frame_auc", "anomalous_segment_share"]
