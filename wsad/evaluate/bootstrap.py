"""Intervals for frame AUC and AP that treat a video, or a camera, as the unit.

Frames of one video are not independent, and videos of one camera share its
background: an interval must resample (or sum over) whole clusters. ``by``
chooses the cluster: ``video`` or ``group`` (the camera). :func:`grouped_bootstrap`
gives the AUC interval from the clustered variance of Obuchowski (1997) with
Student t quantiles on (clusters - 1) degrees of freedom by default (its
coverage is measured by :mod:`wsad.evaluate.coverage`), or the percentile
bootstrap over clusters; the AP interval is the percentile bootstrap over clusters.
"""
from __future__ import annotations

import numpy as np
from scipy import sparse, special

from ..errors import WsadError
from .metrics import VideoScores, average_precision, roc_auc

UNITS = ("video", "group")


def cluster_ids(videos: list[VideoScores], by: str) -> np.ndarray:
    """Cluster index of each video: itself (``video``) or its camera (``group``)."""
    if by not in UNITS:
        raise WsadError(f"bootstrap unit {by!r}; use one of {list(UNITS)}")
    keys = [v.video if by == "video" else v.group for v in videos]
    return np.unique(keys, return_inverse=True)[1].astype(np.int64)


def clustered_auc(videos: list[VideoScores], by: str = "video") -> tuple[float, float, int]:
    """Frame AUC and its standard error for clustered data (Obuchowski 1997,
    Biometrics 53: "Nonparametric analysis of clustered ROC curve data").

    With M positive and N negative frames in I clusters, V10(x) = the share of
    negatives below the positive x (ties 1/2), V01(y) = the share of positives
    above the negative y, and V10_i, V01_i their sums over cluster i (m_i, n_i
    positives and negatives in it):
    S10 = I / ((I-1) M) sum_i (V10_i - m_i A)^2, S01 = I / ((I-1) N) sum_i (V01_i - n_i A)^2,
    S11 = I / (I-1) sum_i (V10_i - m_i A)(V01_i - n_i A),
    var(A) = S10 / M + S01 / N + 2 S11 / (M N).
    With one frame per cluster it is DeLong's variance (DeLong et al. 1988) up to
    the I/(I-1) factors.

    Returns:
        (AUC, standard error, number of clusters I).
    """
    have = [v for v in videos if v.frame_labels is not None]
    if not have:
        raise WsadError("no test video has frame-level ground truth; intervals need events")
    ids = cluster_ids(have, by)
    s = np.concatenate([v.frame_scores() for v in have]).astype(np.float64)
    y = np.concatenate([v.frame_labels for v in have]).astype(bool)
    c = np.concatenate([np.full(v.frames, i) for v, i in zip(have, ids)])
    m, n, k = int(y.sum()), int((~y).sum()), int(ids.max()) + 1
    if m == 0 or n == 0 or k < 2:
        return float("nan"), float("nan"), k
    sp, sn = np.sort(s[y]), np.sort(s[~y])
    v10 = (np.searchsorted(sn, s[y], "left") + np.searchsorted(sn, s[y], "right")) / (2.0 * n)
    v01 = (2 * m - np.searchsorted(sp, s[~y], "right") - np.searchsorted(sp, s[~y], "left")) / (2.0 * m)
    auc = float(v10.mean())
    d10 = np.bincount(c[y], v10, k) - np.bincount(c[y], minlength=k) * auc
    d01 = np.bincount(c[~y], v01, k) - np.bincount(c[~y], minlength=k) * auc
    f = k / (k - 1)
    var = f * ((d10 ** 2).sum() / m ** 2 + (d01 ** 2).sum() / n ** 2 + 2 * (d10 * d01).sum() / (m * n))
    return auc, float(np.sqrt(max(var, 0.0))), k


def clustered_interval(videos: list[VideoScores], by: str = "video",
                       level: float = 0.95) -> tuple[float, float, float, int]:
    """AUC +- t_{(1+level)/2, I-1} se over I clusters (see :func:`clustered_auc`),
    clipped to [0, 1]. Returns (lo, hi, se, I)."""
    a, se, k = clustered_auc(videos, by)
    half = float(special.stdtrit(k - 1, (1 + level) / 2)) * se  # the t quantile
    return max(0.0, a - half), min(1.0, a + half), se, k


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
                             batch: int = 64, by: str = "video") -> tuple[np.ndarray, np.ndarray]:
    """Frame AUC and AP of each resample of the test videos' clusters (NaN where
    a resample holds a single class); ``by="group"`` draws cameras, each with
    all its videos.

    A resample that draws a cluster k times counts its frames k times, so each
    resample is a weighted AUC/AP computed from the per-video count tables in
    one sparse product: no loop over frames.
    """
    have, pos_t, neg_t = _tables(videos)
    if not have:
        raise WsadError("no test video has frame-level ground truth; bootstrap needs events")
    ids = cluster_ids(have, by)
    idx = bootstrap_indices(int(ids.max()) + 1, n_resamples, seed)
    aucs, aps = [], []
    for s in range(0, n_resamples, batch):
        rows = idx[s:s + batch]
        wc = np.zeros((len(rows), int(ids.max()) + 1))
        np.add.at(wc, (np.repeat(np.arange(len(rows)), rows.shape[1]), rows.ravel()), 1.0)
        w = sparse.csr_matrix(wc[:, ids])
        a, p = _auc_ap_from_counts((w @ pos_t).toarray(), (w @ neg_t).toarray())
        aucs.append(a)
        aps.append(p)
    return np.concatenate(aucs), np.concatenate(aps)


def bootstrap_naive(videos: list[VideoScores], n_resamples: int, seed: int,
                    by: str = "video") -> tuple[np.ndarray, np.ndarray]:
    """The plain definition (concatenate the videos of the drawn clusters, score
    them): a reference for :func:`grouped_bootstrap_values`, far slower."""
    have = [v for v in videos if v.frame_labels is not None]
    ids = cluster_ids(have, by)
    members = [np.flatnonzero(ids == c) for c in range(int(ids.max()) + 1)]
    idx = bootstrap_indices(len(members), n_resamples, seed)
    fs = [v.frame_scores() for v in have]
    auc, ap = np.full(n_resamples, np.nan), np.full(n_resamples, np.nan)
    for r, rows in enumerate(idx):
        drawn = [i for c in rows for i in members[c]]
        y = np.concatenate([have[i].frame_labels for i in drawn])
        s = np.concatenate([fs[i] for i in drawn])
        if 0 < y.sum() < len(y):
            auc[r], ap[r] = roc_auc(y, s), average_precision(y, s)
    return auc, ap
