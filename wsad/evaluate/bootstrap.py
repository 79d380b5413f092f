"""Grouped bootstrap intervals for frame AUC and AP.

:func:`grouped_bootstrap` resamples test *videos* (frames of one video are not
independent) and gives percentile intervals for frame AUC and AP.
"""
from __future__ import annotations

import numpy as np
from scipy import sparse

from ..errors import WsadError
from .metrics import VideoScores, average_precision, roc_auc


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
