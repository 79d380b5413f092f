"""Plots of one run's scores (ROC curve, score timelines) and of a store's streams."""
from __future__ import annotations

from pathlib import Path

import matplotlib.pyplot as plt
import numpy as np
import seaborn as sns
from sklearn.metrics import roc_curve

from ..files import atomic_path
from .metrics import ALARM_THRESHOLD, VideoScores


def save_figure(fig, path: Path, dpi: int = 120, close: bool = True) -> Path:
    """Save through a temporary file and a rename: a killed run never leaves half a PNG."""
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=dpi)
    if close:
        plt.close(fig)
    return Path(path)


def roc_plot(curves: dict[str, tuple[np.ndarray, np.ndarray]], path: Path, title: str = "") -> Path:
    """curves: name -> (frame labels, frame scores)."""
    sns.set_theme(style="whitegrid")
    fig, ax = plt.subplots(figsize=(4.6, 4.2))
    for name, (y, s) in curves.items():
        fpr, tpr, _ = roc_curve(y, s)
        ax.plot(fpr, tpr, lw=1.6, label=name)
    ax.plot([0, 1], [0, 1], ls="--", c="grey", lw=1, label="chance")
    ax.set(xlabel="false positive rate (frames)", ylabel="true positive rate (frames)",
           title=title or "frame-level ROC")
    ax.legend(loc="lower right", fontsize=8)
    fig.tight_layout()
    return save_figure(fig, path, 120)


def pick_timeline_videos(videos: list[VideoScores], n: int = 6) -> list[VideoScores]:
    """Anomalous videos with events first, then normal ones, in a stable order."""
    anom = [v for v in videos if v.label == 1 and v.frame_labels is not None]
    norm = [v for v in videos if v.label == 0]
    k = min(len(anom), max(n - min(len(norm), n // 3), n // 2))
    return anom[:k] + norm[:n - k]


def timeline_plot(videos: list[VideoScores], path: Path, title: str = "") -> Path:
    """Frame scores over time for a few test videos, ground truth shaded."""
    sns.set_theme(style="white")
    chosen = pick_timeline_videos(videos)
    fig, axes = plt.subplots(len(chosen), 1, figsize=(8, 1.3 * len(chosen) + 0.6), squeeze=False)
    for ax, v in zip(axes[:, 0], chosen):
        fs = v.frame_scores()
        if v.frame_labels is not None and v.frame_labels.any():
            ax.fill_between(np.arange(v.frames), 0, 1, where=v.frame_labels > 0, color="tab:red",
                            alpha=0.18, step="post", label="ground truth")
        ax.plot(np.arange(v.frames), fs, lw=1.1, color="tab:blue", label="score")
        ax.axhline(ALARM_THRESHOLD, ls=":", c="grey", lw=0.8)
        ax.set_ylim(-0.02, 1.02)
        ax.set_ylabel("score", fontsize=8)
        ax.set_title(f"{v.video} ({'anomalous' if v.label else 'normal'})", fontsize=8, loc="left")
        ax.tick_params(labelsize=7)
    axes[-1, 0].set_xlabel("frame")
    axes[0, 0].legend(loc="upper right", fontsize=7)
    if title:
        fig.suptitle(title, fontsize=9)
    fig.tight_layout()
    return save_figure(fig, path, 110)


def stream_plot(store, videos: list[str], dims: int = 3):
    """A few videos' features over time: some standardised dims (thin) and the
    distance of each segment from the video's mean (thick); events shaded."""
    sns.set_theme(style="white")
    fig, axes = plt.subplots(len(videos), 1, figsize=(9, 1.7 * len(videos) + 0.6), squeeze=False)
    for ax, v in zip(axes[:, 0], videos):
        x = store.views(v)[0]
        z = (x - x.mean(0)) / (x.std(0) + 1e-6)
        t = np.arange(len(x))
        for d in range(min(dims, x.shape[1])):
            ax.plot(t, z[:, d], lw=0.6, alpha=0.6)
        dist = np.linalg.norm(z, axis=1) / np.sqrt(x.shape[1])
        ax.plot(t, 3 * (dist - dist.mean()), lw=1.6, color="k", label="distance from video mean (scaled)")
        lab = store.frame_labels(v)
        if lab is not None and lab.any():
            seg = np.minimum(np.arange(len(lab)) // store.segment_frames, len(x) - 1)
            hit = np.bincount(seg, weights=lab, minlength=len(x)) > 0
            ax.fill_between(t, ax.get_ylim()[0], ax.get_ylim()[1], where=hit, color="tab:red",
                            alpha=0.2, step="mid", label="event (ground truth)")
        ax.set_title(f"{v} ({'anomalous' if store.label(v) else 'normal'}, camera {store.group(v)})",
                     fontsize=8, loc="left")
        ax.tick_params(labelsize=7)
    axes[-1, 0].set_xlabel(f"segment ({store.segment_frames} frames each)")
    axes[0, 0].legend(fontsize=7, loc="upper right")
    fig.tight_layout()
    return fig
