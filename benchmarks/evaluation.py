"""Grouped bootstrap and full evaluation throughput on the test split.

Scores: a noisy function of each segment's ground truth (any scores would
do; what matters is one distinct score per segment, as a model gives).
``bootstrap.ratio_to_single_auc`` = 1,000 grouped (by video) resamples of
frame AUC and AP / one ``sklearn.metrics.roc_auc_score`` call on the same
frames (a naive loop would be ~1,000). ``max_diff_vs_naive`` compares the
first resamples with a per-resample recomputation on the same indices.
``eval.frames_per_s`` = test frames / (metrics + intervals).

    python benchmarks/evaluation.py [tiny|quick|full]
"""
from __future__ import annotations

import numpy as np
from _common import best_of, emit, size_arg, store

RESAMPLES = 1000


def scored_videos(root):
    from wsad.evaluate import VideoScores
    from wsad.store import FeatureStore

    st = FeatureStore(root)
    rng = np.random.default_rng(0)
    out = []
    for v in st.videos("test"):
        lab = st.frame_labels(v)
        n = st.n_segments(v)
        truth = np.zeros(n) if lab is None else np.array(
            [lab[16 * t:16 * t + 16].mean() for t in range(n)])
        out.append(VideoScores(v, st.group(v), st.label(v), (truth + rng.normal(0, 0.7, n)).astype(np.float32),
                               lab, st.frames(v), st.segment_frames))
    return out


def run(size: str) -> dict:
    from sklearn.metrics import roc_auc_score

    from wsad.evaluate import bootstrap_naive, compute_metrics, frame_table, grouped_bootstrap, grouped_bootstrap_values

    videos = scored_videos(store(size))
    table = frame_table(videos)
    lab = table[table["label"] >= 0]
    y, s = lab["label"].to_numpy(), lab["score"].to_numpy()
    single = best_of(lambda: roc_auc_score(y, s), 3)
    boot = best_of(lambda: grouped_bootstrap_values(videos, RESAMPLES, seed=0), 2)
    fast_auc, fast_ap = grouped_bootstrap_values(videos, 20, seed=0)
    naive_auc, naive_ap = bootstrap_naive(videos, 20, seed=0)
    keep = ~np.isnan(naive_auc)
    diff = float(max(np.abs(fast_auc - naive_auc)[keep].max(), np.abs(fast_ap - naive_ap)[keep].max()))
    full = best_of(lambda: (compute_metrics(videos), grouped_bootstrap(videos, RESAMPLES, seed=0)), 2)
    return {"bootstrap": {"ratio_to_single_auc": boot / single, "bootstrap_s": boot,
                          "single_auc_s": single, "resamples": RESAMPLES, "frames": int(len(y)),
                          "videos": len(videos), "max_diff_vs_naive": diff},
            "eval": {"frames_per_s": len(table) / full, "seconds": full, "frames": int(len(table))}}


if __name__ == "__main__":
    emit(run(size_arg()))
