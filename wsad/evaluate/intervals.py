"""Interval kinds for frame AUC beyond the clustered variance (:mod:`.bootstrap`): the logit
scale, the leave-one-cluster-out jackknife (the default), the bias-corrected (and accelerated)
bootstrap, and the macro AUC's interval. Their coverage is measured on the simulation family of
:mod:`.designs` (scripts/coverage_table.py)."""
from __future__ import annotations

import numpy as np
from scipy import sparse, special

from ..errors import WsadError
from .bootstrap import (
    _auc_ap_from_counts,
    _tables,
    bootstrap_indices,
    cluster_ids,
    clustered_auc,
    clustered_interval,
    grouped_bootstrap_values,
)
from .metrics import VideoScores

INTERVALS = ("jackknife", "clustered", "logit", "percentile", "bc", "bca")


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
