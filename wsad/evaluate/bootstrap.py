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
INTERVALS = ("jackknife", "clustered", "logit", "percentile", "bc", "bca")


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


def logit_interval(videos: list[VideoScores], by: str = "video",
                   level: float = 0.95) -> tuple[float, float, float, int]:
    """The clustered interval on the logit scale (delta method: se(logit A) = se / (A (1 - A))),
    t quantiles on I - 1 degrees of freedom, mapped back: it stays inside (0, 1) and is
    asymmetric near 1, where the AUC's sampling distribution is skewed. Returns (lo, hi, se, I)."""
    a, se, k = clustered_auc(videos, by)
    if not 0 < a < 1:
        return a, a, se, k
    half = float(special.stdtrit(k - 1, (1 + level) / 2)) * se / (a * (1 - a))
    z = np.log(a / (1 - a))
    return float(special.expit(z - half)), float(special.expit(z + half)), se, k


def effective_clusters(videos: list[VideoScores], by: str = "video") -> float:
    """Kish's effective number of clusters, (sum w)^2 / sum w^2, with each cluster's weight its
    share of the positive frames plus its share of the negative frames (what it carries of the
    AUC's pairs): I for equal clusters, fewer when a few cameras hold most of the footage."""
    have = [v for v in videos if v.frame_labels is not None]
    ids = cluster_ids(have, by)
    k = int(ids.max()) + 1
    pos = np.bincount(ids, [float(v.frame_labels.sum()) for v in have], k)
    neg = np.bincount(ids, [float(len(v.frame_labels) - v.frame_labels.sum()) for v in have], k)
    w = pos / max(pos.sum(), 1) + neg / max(neg.sum(), 1)
    return float(w.sum() ** 2 / (w ** 2).sum())


def jackknife_interval(videos: list[VideoScores], by: str = "video",
                       level: float = 0.95) -> tuple[float, float, float, int]:
    """The default frame-AUC interval: the leave-one-cluster-out jackknife on the logit scale,
    se = sqrt((I-1)/I sum_i (logit A_(i) - mean)^2) (Quenouille-Tukey; it carries each cluster's
    leverage, which the clustered variance underestimates when clusters are few or unequal), and
    t quantiles on the effective number of clusters minus one (:func:`effective_clusters`),
    mapped back to (0, 1). Its coverage over simulated designs of 6 to 40 cameras is in the
    docs (scripts/coverage_table.py). Returns (lo, hi, se of A by the delta method, I)."""
    a, _, k = clustered_auc(videos, by)
    if not 0 < a < 1 or k < 2:
        return a, a, float("nan"), k
    jack = jackknife_values(videos, by)
    jack = np.clip(jack[np.isfinite(jack)], 1e-9, 1 - 1e-9)
    zj = np.log(jack / (1 - jack))
    se = float(np.sqrt((k - 1) / k * np.sum((zj - zj.mean()) ** 2)))
    df = max(1.0, effective_clusters(videos, by) - 1)
    z, half = np.log(a / (1 - a)), float(special.stdtrit(df, (1 + level) / 2)) * se
    return float(special.expit(z - half)), float(special.expit(z + half)), se * a * (1 - a), k


def jackknife_values(videos: list[VideoScores], by: str = "video") -> np.ndarray:
    """Frame AUC with each cluster left out in turn (the leave-one-out resamples)."""
    have, pos_t, neg_t = _tables(videos)
    ids = cluster_ids(have, by)
    k = int(ids.max()) + 1
    w = 1.0 - np.eye(k)
    auc, _ = _auc_ap_from_counts((sparse.csr_matrix(w[:, ids]) @ pos_t).toarray(),
                                 (sparse.csr_matrix(w[:, ids]) @ neg_t).toarray())
    return auc


def bca_bounds(point: float, boot: np.ndarray, jack: np.ndarray | None, level: float) -> tuple[float, float]:
    """Bias-corrected (and, with ``jack``, accelerated) bootstrap bounds (Efron 1987, JASA 82):
    z0 = Phi^-1(share of resamples below the estimate), a = sum d^3 / (6 (sum d^2)^1.5) with
    d the jackknife deviations, and the bounds at Phi(z0 + (z0 + z) / (1 - a (z0 + z)))."""
    boot = boot[~np.isnan(boot)]
    share = (np.sum(boot < point) + 0.5 * np.sum(boot == point)) / len(boot)
    z0 = float(special.ndtri(min(max(share, 1e-6), 1 - 1e-6)))
    acc = 0.0
    if jack is not None:
        d = np.nanmean(jack) - jack[~np.isnan(jack)]
        denom = 6 * (np.sum(d ** 2)) ** 1.5
        acc = float(np.sum(d ** 3) / denom) if denom > 0 else 0.0
    out = []
    for z in special.ndtri([(1 - level) / 2, (1 + level) / 2]):
        q = special.ndtr(z0 + (z0 + z) / (1 - acc * (z0 + z)))
        out.append(float(np.quantile(boot, q)))
    return out[0], out[1]


def macro_auc_interval(videos: list[VideoScores], n_resamples: int, seed: int, by: str = "video",
                       level: float = 0.95) -> tuple[float, float]:
    """Percentile interval of the macro AUC (the mean of the anomalous videos' within-video
    AUCs) over cluster resamples: a resample drawing a cluster k times counts its videos k times."""
    from .catalogue import per_video_aucs

    keep = [v for v in videos if v.label == 1 and v.frame_labels is not None and 0 < v.frame_labels.sum()
            < len(v.frame_labels)]
    aucs = per_video_aucs(keep)
    all_ids = cluster_ids(videos, by)
    index = {v.video: i for i, v in enumerate(videos)}
    ids = all_ids[[index[v.video] for v in keep]]
    k = int(all_ids.max()) + 1
    draws = bootstrap_indices(k, n_resamples, seed)
    counts = np.zeros((n_resamples, k))
    np.add.at(counts, (np.repeat(np.arange(n_resamples), k), draws.ravel()), 1.0)
    w = counts[:, ids]                                     # each anomalous video's weight per resample
    with np.errstate(invalid="ignore", divide="ignore"):
        means = (w * aucs).sum(axis=1) / w.sum(axis=1)
    means = means[np.isfinite(means)]
    lo, hi = np.percentile(means, [(1 - level) / 2 * 100, (1 + level) / 2 * 100])
    return float(lo), float(hi)


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


def grouped_bootstrap(videos: list[VideoScores], n_resamples: int = 1000, seed: int = 0,
                      level: float = 0.95, by: str = "video", interval: str = "jackknife") -> dict[str, float]:
    """Intervals for frame AUC and AP with the video (``by="video"``) or the camera
    (``by="group"``) as the unit.

    ``interval="jackknife"`` (default): :func:`jackknife_interval`; ``"clustered"``:
    :func:`clustered_interval`; ``"logit"``: :func:`logit_interval`;
    ``"percentile"``: the percentile interval of the AUC over ``n_resamples`` cluster resamples;
    ``"bc"`` / ``"bca"``: the bias-corrected (and accelerated) bootstrap (:func:`bca_bounds`).
    AP always takes the percentile interval over the resamples.

    Returns:
        ``frame_auc_lo/hi``, ``frame_ap_lo/hi``, ``frame_auc_se`` (clustered only),
        ``interval_clusters`` (I) and ``bootstrap_kept`` (resamples holding both
        classes; the others are dropped).
    """
    if interval not in INTERVALS:
        raise WsadError(f"interval {interval!r}; use one of {list(INTERVALS)}")
    auc, ap = grouped_bootstrap_values(videos, n_resamples, seed, by=by)
    keep = ~np.isnan(auc)
    q = [(1 - level) / 2 * 100, (1 + level) / 2 * 100]
    lo_a, hi_a = np.percentile(auc[keep], q)
    lo_p, hi_p = np.percentile(ap[keep], q)
    out = {"frame_ap_lo": float(lo_p), "frame_ap_hi": float(hi_p), "bootstrap_kept": int(keep.sum())}
    kind = {"logit": logit_interval, "jackknife": jackknife_interval}.get(interval, clustered_interval)
    lo_c, hi_c, se, k = kind(videos, by, level)
    out["interval_clusters"] = k
    if interval in ("clustered", "logit", "jackknife"):
        lo_a, hi_a = lo_c, hi_c
        out["frame_auc_se"] = se
    elif interval in ("bc", "bca"):
        point = clustered_auc(videos, by)[0]
        lo_a, hi_a = bca_bounds(point, auc, jackknife_values(videos, by) if interval == "bca" else None, level)
    out.update({"frame_auc_lo": float(lo_a), "frame_auc_hi": float(hi_a)})
    return out


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
