"""A video-level decision: a threshold on the video score (its maximum segment
score), chosen on weak validation, and the accuracy it gives on the test split."""
from __future__ import annotations

import numpy as np

from ..errors import WsadError
from .metrics import VideoScores


def choose_video_threshold(scores, labels) -> float:
    """The threshold on video scores that maximises balanced accuracy (mean of the
    true-positive and true-negative rates, a video called anomalous when its score
    >= threshold) on held-out *training* videos with video labels only.

    Among equally good cut points the highest is kept (fewer false alarms), and the
    threshold is put halfway between that video's score and the next lower one, so
    it sits between the classes rather than on a training video's score.
    """
    s = np.asarray(scores, dtype=np.float64)
    y = np.asarray(labels).astype(bool)
    if y.all() or not y.any():
        raise WsadError("a video threshold needs anomalous and normal held-out training videos")
    cuts = np.unique(s)
    best = max(cuts, key=lambda t: (balanced_accuracy(s >= t, y), t))
    below = s[s < best]
    return float((best + below.max()) / 2) if len(below) else float(best)


def balanced_accuracy(pred, y) -> float:
    """(TPR + TNR) / 2."""
    pred, y = np.asarray(pred, bool), np.asarray(y, bool)
    return float(((pred & y).sum() / max(y.sum(), 1) + (~pred & ~y).sum() / max((~y).sum(), 1)) / 2)


def video_decision(videos: list[VideoScores], threshold: float) -> dict[str, float]:
    """``video_accuracy`` and ``video_balanced_accuracy`` of calling a video anomalous
    when its maximum segment score >= ``threshold``."""
    s = np.array([float(np.max(v.segment_scores)) for v in videos])
    y = np.array([v.label for v in videos]).astype(bool)
    pred = s >= threshold
    return {"video_accuracy": float((pred == y).mean()), "video_balanced_accuracy": balanced_accuracy(pred, y)}
