"""Frame-level evaluation kernels: scores joined with ground truth, AUC and AP.

Segment scores become frame scores (segment t covers frames [F t, F t + F),
F = the store's ``segment_frames``, the last one also the tail). The metrics themselves are declared in
:mod:`wsad.evaluate.catalogue`; the main ones:

- ``frame_auc``: ROC AUC over the concatenated frames of all test videos (micro),
  AUC = (R_+ - n_+ (n_+ + 1) / 2) / (n_+ n_-), R_+ the sum of the positive frames'
  mid-ranks (Mann & Whitney 1947; ties count 1/2);
- ``frame_ap``: average precision, AP = sum_n (R_n - R_{n-1}) P_n over distinct
  score thresholds from high to low (the step-wise area under precision-recall);
- ``anomalous_video_auc``: frame AUC over the frames of anomalous test videos only;
- ``false_alarm_rate``: share of normal test videos' frames scored >= 0.5;
- ``video_auc``: ROC AUC of the per-video max segment score against video labels.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import WsadError
from ..store.format import SEGMENT_FRAMES, FeatureStore, segments_to_frames

#: The fixed threshold of ``false_alarm_rate`` (and the line drawn on timelines).
ALARM_THRESHOLD = 0.5


# --- reference-free metric kernels --------------------------------------------------------
def _two_classes(y: np.ndarray, what: str) -> None:
    n_pos = int(y.sum())
    if n_pos == 0 or n_pos == len(y):
        raise WsadError(f"{what} needs both classes; got only "
                        f"{'anomalous' if n_pos else 'normal'} ({len(y)} items)")


def average_ranks(s: np.ndarray) -> np.ndarray:
    """1-based ranks of ``s`` with ties given their mean rank (``scipy.stats.rankdata``'s
    "average"; written here because importing ``scipy.stats`` costs every run ~0.6 s).
    A NaN makes every rank NaN, as there."""
    if np.isnan(s).any():
        return np.full(len(s), np.nan)
    order = np.argsort(s, kind="mergesort")
    inv = np.empty(len(s), dtype=np.intp)
    inv[order] = np.arange(len(s))
    ordered = s[order]
    first = np.r_[True, ordered[1:] != ordered[:-1]]
    dense = np.cumsum(first)[inv]
    bounds = np.r_[np.flatnonzero(first), len(s)]
    return 0.5 * (bounds[dense] + bounds[dense - 1] + 1)


def roc_auc(y: np.ndarray, s: np.ndarray, what: str = "ROC AUC") -> float:
    """ROC AUC by mid-ranks (Mann-Whitney U / (n_+ n_-)); ties count 1/2."""
    y = np.asarray(y).astype(bool).ravel()
    s = np.asarray(s, dtype=np.float64).ravel()
    if len(y) != len(s):
        raise WsadError(f"{what}: {len(y)} labels but {len(s)} scores")
    _two_classes(y, what)
    n_pos = int(y.sum())
    n_neg = len(y) - n_pos
    r = average_ranks(s)
    return float((r[y].sum() - n_pos * (n_pos + 1) / 2) / (n_pos * n_neg))


def average_precision(y: np.ndarray, s: np.ndarray, what: str = "AP") -> float:
    """AP = sum_n (R_n - R_{n-1}) P_n over distinct thresholds, high to low."""
    y = np.asarray(y).astype(bool).ravel()
    s = np.asarray(s, dtype=np.float64).ravel()
    _two_classes(y, what)
    order = np.argsort(-s, kind="mergesort")
    s_sorted, y_sorted = s[order], y[order]
    last = np.r_[np.flatnonzero(np.diff(s_sorted)), len(s_sorted) - 1]  # end of each tie block
    tp = np.cumsum(y_sorted)[last]
    fp = (last + 1) - tp
    precision = tp / (tp + fp)
    recall_step = np.diff(np.r_[0, tp]) / tp[-1]
    return float((recall_step * precision).sum())


# --- the evaluation ------------------------------------------------------------------------
@dataclass
class VideoScores:
    """Scores and ground truth of one test video."""

    video: str
    group: str
    label: int
    segment_scores: np.ndarray
    frame_labels: np.ndarray | None  # None: anomalous video without events
    frames: int
    segment_frames: int = SEGMENT_FRAMES

    def frame_scores(self) -> np.ndarray:
        return segments_to_frames(self.segment_scores, self.frames, self.segment_frames)


def video_scores(store: FeatureStore, scores: dict[str, np.ndarray]) -> list[VideoScores]:
    """Segment scores per video joined with the store's labels and ground truth."""
    return [VideoScores(v, store.group(v), store.label(v), s, store.frame_labels(v),
                        store.frames(v), store.segment_frames) for v, s in scores.items()]


def frame_table(videos: list[VideoScores]) -> pd.DataFrame:
    """Frames of all videos: columns video, frame, score, label, group. An
    anomalous video without events has label -1 (unknown) on every frame."""
    cols = ["video", "frame", "score", "label", "group"]
    parts = []
    for v in videos:
        lab = v.frame_labels.astype(np.int8) if v.frame_labels is not None else np.full(v.frames, -1, np.int8)
        parts.append(pd.DataFrame({"video": v.video, "frame": np.arange(v.frames, dtype=np.int64),
                                   "score": v.frame_scores(),
                                   "label": lab, "group": v.group}))
    return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=cols)


def per_video_table(videos: list[VideoScores]) -> pd.DataFrame:
    """One row per test video: label, group, frames, max/mean score, the share
    of anomalous frames, the share of frames alarmed, and the within-video AUC."""
    rows = []
    for v in videos:
        fs = v.frame_scores()
        row = {"video": v.video, "group": v.group, "label": v.label, "frames": v.frames,
               "max_score": float(fs.max()), "mean_score": float(fs.mean()),
               "alarm_share": float((fs >= ALARM_THRESHOLD).mean()),
               "anomalous_share": np.nan, "within_auc": np.nan}
        if v.frame_labels is not None:
            row["anomalous_share"] = float(v.frame_labels.mean())
            if 0 < v.frame_labels.sum() < len(v.frame_labels):
                row["within_auc"] = roc_auc(v.frame_labels, fs)
        rows.append(row)
    return pd.DataFrame(rows)
