"""A video-level decision: a threshold on the video score (its maximum segment
score), chosen on weak validation, and the accuracy it gives on the test split."""
from __future__ import annotations

import numpy as np

from ..errors import WsadError
from .metrics import VideoScores

#: How a video threshold is chosen on held-out training videos (see :func:`choose_video_threshold`).
THRESHOLD_RULES = ("balanced_accuracy", "class_medians")


def choose_video_threshold(scores, labels, rule: str = "balanced_accuracy") -> float:
    """The threshold on video scores, chosen on held-out *training* videos with video labels
    only (a video is called anomalous when its score >= threshold).

    ``balanced_accuracy``: the cut that maximises balanced accuracy (mean of the true-positive
    and true-negative rates). Among equally good cut points the highest is kept (fewer false
    alarms), and the threshold is put halfway between that video's score and the next lower
    one, so it sits between the classes rather than on a training video's score.

    ``class_medians``: halfway between the median score of the anomalous and of the normal
    videos. On a few dozen held-out videos the best cut is an argmax over a step function that
    jumps with every score; the medians move little. Measured on two open MIL collections with
    five members (docs: "Small collections"): the test balanced accuracy's spread over seeds
    fell and its mean rose. The small-collection mode uses it.
    """
    s = np.asarray(scores, dtype=np.float64)
    y = np.asarray(labels).astype(bool)
    if y.all() or not y.any():
        raise WsadError("a video threshold needs anomalous and normal held-out training videos")
    if rule == "class_medians":
        return float((np.median(s[y]) + np.median(s[~y])) / 2)
    if rule != "balanced_accuracy":
        raise WsadError(f"video threshold rule {rule!r}; use one of {', '.join(THRESHOLD_RULES)}")
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
