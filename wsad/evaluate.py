"""Frame-level evaluation.

Segment scores become frame scores (segment t covers frames [16t, 16t+16), the
last one also the tail); bags resampled to a fixed number of chunks map back
through the chunk boundaries. Metrics (DESIGN names):

- ``frame_auc``: ROC AUC over the concatenated frames of all test videos (micro),
  AUC = (R_+ - n_+ (n_+ + 1) / 2) / (n_+ n_-), R_+ the sum of the positive frames'
  mid-ranks (Mann & Whitney 1947; ties count 1/2);
- ``frame_ap``: average precision, AP = sum_n (R_n - R_{n-1}) P_n over distinct
  score thresholds from high to low (the step-wise area under precision-recall);
- ``anomalous_video_auc``: frame AUC over the frames of anomalous test videos only;
- ``false_alarm_rate``: share of normal test videos' frames scored >= 0.5;
- ``video_auc``: ROC AUC of the per-video max segment score against video labels.

:func:`grouped_bootstrap` resamples test *videos* (frames of one video are not
independent) and gives percentile 95% intervals for frame AUC and AP.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import sparse
from scipy.stats import rankdata

from .errors import WsadError

METRICS = ("frame_auc", "frame_ap", "anomalous_video_auc", "false_alarm_rate", "video_auc")
ALARM_THRESHOLD = 0.5


# --- scores to frames --------------------------------------------------------------------
def chunk_bounds(n_segments: int, n_chunks: int) -> np.ndarray:
    """Boundaries b_0..b_C of C equal spans over T segments (chunk i = [b_i, b_{i+1}))."""
    return np.linspace(0, n_segments, n_chunks + 1).round().astype(np.int64)


def chunk_of_segment(n_segments: int, n_chunks: int) -> np.ndarray:
    """For each segment, the (non-empty) chunk whose span contains it."""
    b = chunk_bounds(n_segments, n_chunks)
    return np.searchsorted(b[1:], np.arange(n_segments), side="right")


def chunks_to_segments(chunk_scores: np.ndarray, n_segments: int) -> np.ndarray:
    """Scores of a bag resampled to C chunks, mapped back to its T segments."""
    return np.asarray(chunk_scores)[chunk_of_segment(n_segments, len(chunk_scores))]


def segments_to_frames(segment_scores: np.ndarray, frames: int, segment_frames: int = 16) -> np.ndarray:
    """Repeat each segment score over its frames; the tail takes the last segment."""
    s = np.asarray(segment_scores)
    idx = np.minimum(np.arange(int(frames)) // segment_frames, len(s) - 1)
    return s[idx]


# --- reference-free metric kernels --------------------------------------------------------
def _two_classes(y: np.ndarray, what: str) -> None:
    n_pos = int(y.sum())
    if n_pos == 0 or n_pos == len(y):
        raise WsadError(f"{what} needs both classes; got only "
                        f"{'anomalous' if n_pos else 'normal'} ({len(y)} items)")


def roc_auc(y: np.ndarray, s: np.ndarray, what: str = "ROC AUC") -> float:
    """ROC AUC by mid-ranks (Mann-Whitney U / (n_+ n_-)); ties count 1/2."""
    y = np.asarray(y).astype(bool).ravel()
    s = np.asarray(s, dtype=np.float64).ravel()
    if len(y) != len(s):
        raise WsadError(f"{what}: {len(y)} labels but {len(s)} scores")
    _two_classes(y, what)
    n_pos = int(y.sum())
    n_neg = len(y) - n_pos
    r = rankdata(s)
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
    segment_frames: int = 16

    def frame_scores(self) -> np.ndarray:
        return segments_to_frames(self.segment_scores, self.frames, self.segment_frames)


def frame_table(videos: list[VideoScores]) -> pd.DataFrame:
    """Frames of all videos: columns video, frame, score, label, group. An
    anomalous video without events has label -1 (unknown) on every frame."""
    cols = ["video", "frame", "score", "label", "group"]
    parts = []
    for v in videos:
        lab = v.frame_labels.astype(np.int8) if v.frame_labels is not None else np.full(v.frames, -1, np.int8)
        parts.append(pd.DataFrame({"video": v.video, "frame": np.arange(v.frames, dtype=np.int64),
                                   "score": v.frame_scores().astype(np.float64),
                                   "label": lab, "group": v.group}))
    return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=cols)


def compute_metrics(videos: list[VideoScores]) -> dict[str, float]:
    """The DESIGN metrics. Frame-level ones need events for anomalous test
    videos; videos without them are skipped with a warning."""
    if not videos:
        raise WsadError("no test videos to evaluate")
    out: dict[str, float] = {}
    missing = [v.video for v in videos if v.frame_labels is None]
    if missing:
        warnings.warn(f"{len(missing)} anomalous test video(s) have no events "
                      f"(e.g. {missing[0]}); frame-level metrics skip them", stacklevel=2)
    have = [v for v in videos if v.frame_labels is not None]
    if have:
        s = np.concatenate([v.frame_scores() for v in have])
        y = np.concatenate([v.frame_labels for v in have])
        if 0 < y.sum() < len(y):
            out["frame_auc"] = roc_auc(y, s, "frame_auc")
            out["frame_ap"] = average_precision(y, s, "frame_ap")
        anom = [v for v in have if v.label == 1]
        if anom:
            ya = np.concatenate([v.frame_labels for v in anom])
            if 0 < ya.sum() < len(ya):
                sa = np.concatenate([v.frame_scores() for v in anom])
                out["anomalous_video_auc"] = roc_auc(ya, sa, "anomalous_video_auc")
    normal = [v for v in videos if v.label == 0]
    if normal:
        sn = np.concatenate([v.frame_scores() for v in normal])
        out["false_alarm_rate"] = float((sn >= ALARM_THRESHOLD).mean())
    labels = np.array([v.label for v in videos])
    if 0 < labels.sum() < len(labels):
        out["video_auc"] = roc_auc(labels, [float(np.max(v.segment_scores)) for v in videos],
                                   "video_auc")
    return out


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


# --- grouped bootstrap --------------------------------------------------------------------
def bootstrap_indices(n_videos: int, n_resamples: int, seed: int) -> np.ndarray:
    """Resampled video indices [n_resamples, n_videos] (with replacement)."""
    return np.random.default_rng(seed).integers(0, n_videos, size=(n_resamples, n_videos))


def _tables(videos: list[VideoScores]):
    """Per-video counts of positive/negative frames at each distinct score rank.

    Frames within a segment share one score, so the tables are small
    (distinct scores x videos) even for a million frames.
    """
    have = [v for v in videos if v.frame_labels is not None]
    keys, pos_w, neg_w, vid = [], [], [], []
    for i, v in enumerate(have):
        fs = v.frame_scores()
        uniq, inv = np.unique(fs, return_inverse=True)
        p = np.bincount(inv, weights=v.frame_labels, minlength=len(uniq))
        n = np.bincount(inv, minlength=len(uniq)) - p
        keys.append(uniq)
        pos_w.append(p)
        neg_w.append(n)
        vid.append(np.full(len(uniq), i))
    keys, pos_w, neg_w, vid = map(np.concatenate, (keys, pos_w, neg_w, vid))
    glob, rank = np.unique(keys, return_inverse=True)
    # Consecutive scores that hold no positive frame in any video are merged into one
    # level: every positive is above (or below) all of them alike, so AUC and AP of every
    # resample are unchanged, and the tables shrink by about the share of negative frames.
    has_pos = np.bincount(rank, weights=pos_w, minlength=len(glob)) > 0
    starts = has_pos | np.r_[True, has_pos[:-1]]
    level = np.cumsum(starts) - 1
    rank = level[rank]
    shape = (len(have), int(level[-1]) + 1)
    pos = sparse.csr_matrix((pos_w, (vid, rank)), shape=shape)
    neg = sparse.csr_matrix((neg_w, (vid, rank)), shape=shape)
    return have, pos, neg


def _auc_ap_from_counts(pos: np.ndarray, neg: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Row-wise AUC and AP from weighted counts per ascending distinct score."""
    n_pos, n_neg = pos.sum(axis=1), neg.sum(axis=1)
    neg_below = np.cumsum(neg, axis=1) - neg
    with np.errstate(invalid="ignore", divide="ignore"):
        auc = (pos * (neg_below + 0.5 * neg)).sum(axis=1) / (n_pos * n_neg)
        tp = np.cumsum(pos[:, ::-1], axis=1)
        fp = np.cumsum(neg[:, ::-1], axis=1)
        prec = np.where(tp + fp > 0, tp / np.maximum(tp + fp, 1e-300), 0.0)
        ap = (pos[:, ::-1] * prec).sum(axis=1) / n_pos
    bad = (n_pos == 0) | (n_neg == 0)
    auc[bad] = np.nan
    ap[bad] = np.nan
    return auc, ap


def grouped_bootstrap_values(videos: list[VideoScores], n_resamples: int = 1000, seed: int = 0,
                             batch: int = 64) -> tuple[np.ndarray, np.ndarray]:
    """Frame AUC and AP of each resample of the test videos (NaN where a
    resample holds a single class).

    A resample that draws video i k times counts its frames k times, so each
    resample is a weighted AUC/AP computed from the per-video count tables in
    one sparse product: no loop over frames.
    """
    have, pos_t, neg_t = _tables(videos)
    if not have:
        raise WsadError("no test video has frame-level ground truth; bootstrap needs events")
    idx = bootstrap_indices(len(have), n_resamples, seed)
    aucs, aps = [], []
    for s in range(0, n_resamples, batch):
        rows = idx[s:s + batch]
        w = np.zeros((len(rows), len(have)))
        np.add.at(w, (np.repeat(np.arange(len(rows)), rows.shape[1]), rows.ravel()), 1.0)
        w = sparse.csr_matrix(w)
        a, p = _auc_ap_from_counts((w @ pos_t).toarray(), (w @ neg_t).toarray())
        aucs.append(a)
        aps.append(p)
    return np.concatenate(aucs), np.concatenate(aps)


def grouped_bootstrap(videos: list[VideoScores], n_resamples: int = 1000, seed: int = 0,
                      level: float = 0.95) -> dict[str, float]:
    """Percentile intervals for frame AUC and AP over resampled test videos.

    Returns ``frame_auc_lo/hi``, ``frame_ap_lo/hi`` and ``bootstrap_kept``
    (resamples holding both classes; the others are dropped).
    """
    auc, ap = grouped_bootstrap_values(videos, n_resamples, seed)
    keep = ~np.isnan(auc)
    q = [(1 - level) / 2 * 100, (1 + level) / 2 * 100]
    lo_a, hi_a = np.percentile(auc[keep], q)
    lo_p, hi_p = np.percentile(ap[keep], q)
    return {"frame_auc_lo": float(lo_a), "frame_auc_hi": float(hi_a),
            "frame_ap_lo": float(lo_p), "frame_ap_hi": float(hi_p),
            "bootstrap_kept": int(keep.sum())}


def bootstrap_naive(videos: list[VideoScores], n_resamples: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """The plain definition (concatenate the drawn videos, score them): a
    reference for :func:`grouped_bootstrap_values`, far slower."""
    have = [v for v in videos if v.frame_labels is not None]
    idx = bootstrap_indices(len(have), n_resamples, seed)
    fs = [v.frame_scores() for v in have]
    auc, ap = np.full(n_resamples, np.nan), np.full(n_resamples, np.nan)
    for r, rows in enumerate(idx):
        y = np.concatenate([have[i].frame_labels for i in rows])
        s = np.concatenate([fs[i] for i in rows])
        if 0 < y.sum() < len(y):
            auc[r], ap[r] = roc_auc(y, s), average_precision(y, s)
    return auc, ap
