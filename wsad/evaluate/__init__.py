"""Frame-level evaluation: scores to frames, the DESIGN metrics, grouped
bootstrap intervals, and the per-run plots."""
from .bootstrap import bootstrap_indices, bootstrap_naive, grouped_bootstrap, grouped_bootstrap_values
from .metrics import (
                      ALARM_THRESHOLD,
                      METRICS,
                      VideoScores,
                      average_precision,
                      compute_metrics,
                      frame_table,
                      per_video_table,
                      roc_auc,
                      video_scores,
)

__all__ = ["bootstrap_indices", "bootstrap_naive", "grouped_bootstrap", "grouped_bootstrap_values",
           "ALARM_THRESHOLD", "METRICS", "VideoScores", "average_precision", "compute_metrics",
           "frame_table", "per_video_table", "roc_auc", "video_scores"]
