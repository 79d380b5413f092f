"""Evaluation: scores to frames and metrics (:mod:`.metrics`, declared in :mod:`.catalogue`),
intervals (:mod:`.bootstrap`), the video decision, alarms and DET points, and the pure function
that turns scores into an :class:`Evaluation` (:mod:`.evaluation`, :mod:`.from_scores`).
Nothing here writes files or logs; plots are in :mod:`.plots`."""
from .bootstrap import bootstrap_indices, bootstrap_naive, grouped_bootstrap_values
from .catalogue import CATALOGUE, Metric, TestSet, compute_metrics
from .evaluation import Evaluation, EvaluationSettings, Scored, Transfer, evaluate
from .from_scores import evaluate_scores, scored, store_events
from .intervals import grouped_bootstrap
from .metrics import (
    ALARM_THRESHOLD,
    VideoScores,
    average_precision,
    frame_table,
    per_video_table,
    roc_auc,
    video_scores,
)

__all__ = ["bootstrap_indices", "bootstrap_naive", "grouped_bootstrap", "grouped_bootstrap_values",
           "CATALOGUE", "Metric", "TestSet", "compute_metrics", "Evaluation", "EvaluationSettings", "Scored",
           "Transfer", "evaluate", "evaluate_scores", "scored", "store_events", "ALARM_THRESHOLD", "VideoScores",
           "average_precision", "frame_table", "per_video_table", "roc_auc", "video_scores"]
