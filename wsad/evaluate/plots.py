"""Plots of one run's scores (ROC curve, score timelines) and of a store's streams."""
from __future__ import annotations

from pathlib import Path

import matplotlib.pyplot as plt
import numpy as np

from ..files import atomic_path
from .det import det_points
from .metrics import ALARM_THRESHOLD, VideoScores


def _theme(style: str) -> None:
    """matplotlib's own white / whitegrid sheets: a run draws its figures without importing
    seaborn (about 1 s of a single run's end, measured here)."""
    plt.style.use(f"seaborn-v0_8-{style}")


def _palette(n: int) -> list:
    """``n`` colours of tab10, cycling."""
    cmap = plt.get_cmap("tab10")
    return [cmap(i % 10) for i in range(max(1, n))]


def save_figure(fig, path: Path, dpi: int = 120, close: bool = True) -> Path:
    """Save through a temporary file and a rename: a killed run never leaves half a PNG."""
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=dpi)
    if close:
        plt.close(fig)
    return Path(path)


def roc_plot(curves: dict[str, tuple[np.ndarray, np.ndarray]], path: Path, title: str = "") -> Path:
    """:func:`roc_figure` saved to ``path``."""
    return save_figure(roc_figure(curves, title), path, 120)


def roc_figure(curves: dict[str, tuple[np.ndarray, np.ndarray]], title: str = ""):
    """Frame-level ROC curves; ``curves``: name -> (frame labels, frame scores)."""
    _theme("whitegrid")
    fig, ax = plt.subplots(figsize=(4.6, 4.2))
    for name, (y, s) in curves.items():
        fpr, fnr, _ = det_points(s, y)   # the DET's points are the ROC's (tpr = 1 - fnr)
        fpr, tpr = np.r_[1.0, fpr, 0.0][::-1], np.r_[1.0, 1 - fnr, 0.0][::-1]
        ax.plot(fpr, tpr, lw=1.6, label=name)
    ax.plot([0, 1], [0, 1], ls="--", c="grey", lw=1, label="chance")
    ax.set(xlabel="false positive rate (frames)", ylabel="true positive rate (frames)",
           title=title or "frame-level ROC")
    ax.legend(loc="lower right", fontsize=8)
    fig.tight_layout()
    plt.close(fig)   # shown once, by the returned Figure's own display
    return fig


def pick_timeline_videos(videos: list[VideoScores], n: int = 6) -> list[VideoScores]:
    """Anomalous videos with events first, then normal ones, in a stable order."""
    anom = [v for v in videos if v.label == 1 and v.frame_labels is not None]
    norm = [v for v in videos if v.label == 0]
    k = min(len(anom), max(n - min(len(norm), n // 3), n // 2))
    return anom[:k] + norm[:n - k]


def timeline_plot(videos: list[VideoScores], path: Path, title: str = "") -> Path:
    """:func:`timelines_figure` of a few test videos, saved to ``path``."""
    return save_figure(timelines_figure(pick_timeline_videos(videos), title), path, 110)


def timelines_figure(chosen: list[VideoScores], title: str = ""):
    """Frame scores over time for some test videos, ground truth shaded."""
    _theme("white")
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
    plt.close(fig)   # shown once, by the returned Figure's own display
    return fig


def timeline_figure(traces: dict[str, np.ndarray], truth: np.ndarray | None, title: str = "",
                    fps: float | None = None, threshold: float | None = None, alarms=None):
    """One video's frame scores, one line per model (``traces``: name -> frame scores), the
    ground truth shaded, the alarm threshold dashed and the alarms it raises as bars below
    (``alarms``: name -> [n, 2] frame intervals); the x axis in seconds when ``fps`` is known."""
    _theme("white")
    fig, ax = plt.subplots(figsize=(9, 2.6))
    n = len(next(iter(traces.values()))) if traces else (len(truth) if truth is not None else 0)
    scale = 1.0 / fps if fps else 1.0
    t = np.arange(n) * scale
    if truth is not None and np.any(truth):
        ax.fill_between(t, 0, 1, where=np.asarray(truth) > 0, color="tab:red", alpha=0.15, step="post",
                        label="ground truth")
    palette = _palette(len(traces))
    for (name, scores), col in zip(traces.items(), palette):
        ax.plot(t, scores, lw=1.1, color=col, label=name)
        for k, (a, b) in enumerate(np.asarray((alarms or {}).get(name, np.zeros((0, 2)))).reshape(-1, 2)):
            ax.plot([a * scale, b * scale], [-0.04, -0.04], lw=4, color=col, solid_capstyle="butt",
                    label="alarms" if k == 0 and len(traces) == 1 else None)
    if threshold is not None:
        ax.axhline(threshold, ls="--", c="0.3", lw=0.9, label=f"threshold {threshold:.3f}")
    ax.set_ylim(-0.08, 1.02)
    ax.set(xlabel="seconds" if fps else "frame", ylabel="score", title=title)
    ax.legend(fontsize=7, loc="upper right", ncol=2)
    fig.tight_layout()
    plt.close(fig)   # shown once, by the returned Figure's own display
    return fig


def stream_plot(store, videos: list[str], dims: int = 3):
    """A few videos' features over time: some standardised dims (thin) and the
    distance of each segment from the video's mean (thick); events shaded."""
    _theme("white")
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
    plt.close(fig)   # shown once, by the returned Figure's own display
    return fig


_PROBIT_TICKS = (0.001, 0.01, 0.05, 0.2, 0.5, 0.8, 0.95, 0.99)


def _probit(p) -> np.ndarray:
    from scipy.stats import norm

    return norm.ppf(np.clip(np.asarray(p, dtype=np.float64), 5e-4, 1 - 5e-4))


def _probit_axis(ax, which: str) -> None:
    ticks = [_probit(t) for t in _PROBIT_TICKS]
    labels = [f"{100 * t:g}%" for t in _PROBIT_TICKS]
    (ax.set_xticks if which == "x" else ax.set_yticks)(ticks, labels)
    (ax.set_xlim if which == "x" else ax.set_ylim)(_probit(5e-4) - 0.1, _probit(1 - 5e-4) + 0.1)


def event_front(events):
    """The event points no other threshold beats on both axes (fewer false alarms per hour
    *and* fewer events missed), by false alarms per hour. The rate is not monotone in the
    threshold (low thresholds merge alarms), so the raw points zigzag."""
    ev = events.dropna().sort_values(["false_per_hour", "event_miss"])
    keep = ev["event_miss"].to_numpy() < np.minimum.accumulate(
        np.concatenate([[np.inf], ev["event_miss"].to_numpy()[:-1]]))
    return ev[keep]


def det_plot(curves: dict, path: Path, title: str = "") -> Path:
    """:func:`det_figure` saved to ``path``."""
    return save_figure(det_figure(curves, title), path, 110)


def det_figure(curves: dict, title: str = ""):
    """The detection error trade-off (Martin et al., Eurospeech 1997) on normal-deviate axes.

    ``curves``: name -> (frame points with columns fpr, fnr, threshold; event points with columns
    threshold, event_miss, false_per_hour; the budget threshold or None). Left: frames, miss
    probability against false-alarm probability. Right: events, the share of events no alarm
    overlaps against false alarms per hour of test footage (symmetric log axis). The budget
    threshold is marked on both."""
    _theme("whitegrid")
    fig, (left, right) = plt.subplots(1, 2, figsize=(10, 4.3))
    palette = _palette(len(curves))
    for (name, (frames, events, threshold)), col in zip(curves.items(), palette):
        left.plot(_probit(frames["fpr"]), _probit(frames["fnr"]), lw=1.5, color=col, label=name)
        if len(events):
            ev = event_front(events)
            right.plot(ev["false_per_hour"], _probit(ev["event_miss"]), lw=1.5, color=col,
                       drawstyle="steps-post", label=name)
        if threshold is None:
            continue
        at = frames[frames["threshold"] >= threshold]
        fpr, fnr = (at["fpr"].iloc[0], at["fnr"].iloc[0]) if len(at) else (0.0, 1.0)
        left.plot(_probit(fpr), _probit(fnr), "o", color=col, ms=7, mec="k")
        hit = events[np.isclose(events["threshold"], threshold)] if len(events) else events
        if len(hit):
            right.plot(hit["false_per_hour"].iloc[0], _probit(hit["event_miss"].iloc[0]), "o",
                       color=col, ms=7, mec="k")
    left.plot([], [], "o", color="0.6", mec="k", label="budget threshold")
    _probit_axis(left, "x")
    _probit_axis(left, "y")
    left.set(xlabel="false-alarm probability (normal frames)", ylabel="miss probability (anomalous frames)",
             title="frames")
    right.set_xscale("symlog", linthresh=0.1)
    _probit_axis(right, "y")
    right.set(xlabel="false alarms per hour of test footage", ylabel="events missed",
              title="events (fewest missed at each rate)")
    left.legend(fontsize=7, loc="lower left")
    if title:
        fig.suptitle(title, fontsize=10)
    fig.tight_layout()
    plt.close(fig)   # shown once, by the returned Figure's own display
    return fig
