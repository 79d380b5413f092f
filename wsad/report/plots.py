"""Seaborn plots for a report: metric per variant, ROC overlay, learning curves,
timelines of the same test videos across variants."""
from __future__ import annotations

import tempfile
from pathlib import Path

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
import seaborn as sns

from ..evaluate.det import DET_EVENTS, DET_FRAMES
from ..evaluate.plots import det_plot, roc_plot, save_figure


def metric_plot(rep, metric: str, path: Path) -> Path:
    return save_figure(metric_figure(rep, metric), path, 120)


def metric_figure(rep, metric: str):
    """One metric per variant: each seed a dot, the mean with its 95% t-interval."""
    sns.set_theme(style="whitegrid")
    t = rep.table[rep.table.metric == metric].reset_index(drop=True)
    runs = rep.runs.dropna(subset=[f"metrics.{metric}"])
    order = list(t.variant)
    fig, ax = plt.subplots(figsize=(7, 0.55 * len(order) + 1.6))
    sns.stripplot(data=runs, y="variant", x=f"metrics.{metric}", order=order, ax=ax, color="0.35",
                  size=5, jitter=0.12, alpha=0.8)
    lo = (t["mean"] - t["lo"]).fillna(0).to_numpy()
    hi = (t["hi"] - t["mean"]).fillna(0).to_numpy()
    ax.errorbar(t["mean"], np.arange(len(t)), xerr=[lo, hi], fmt="o", color="tab:red", capsize=4,
                label="mean, 95% t-interval")
    ax.set(xlabel=metric, ylabel="", title=f"{metric} per variant (dots: seeds)")
    ax.legend(loc="best", fontsize=8)
    fig.tight_layout()
    plt.close(fig)   # shown once, by the returned Figure's own display
    return fig


def _one_run_per_variant(rep) -> dict[str, str]:
    out = {}
    for v, sub in rep.runs.groupby("variant", sort=False):
        out[v] = sub.sort_values("seed").run_id.iloc[0]
    return out


def _artifact(uri: str, run_id: str, path: str, tmp: Path) -> pd.DataFrame | None:
    """A table artifact of a run (parquet or CSV), None when the run has none."""
    from ..tracking.client import download

    p = download(uri, run_id, path, tmp / run_id)
    if p is None:
        return None
    return pd.read_parquet(p) if path.endswith(".parquet") else pd.read_csv(p)


def det_overlay(rep, uri: str, tmp: Path, path: Path) -> Path | None:
    """The DET curves of one run per variant, each with its budget threshold marked."""
    curves = {}
    for v, run_id in _one_run_per_variant(rep).items():
        frames = _artifact(uri, run_id, DET_FRAMES, tmp)
        events = _artifact(uri, run_id, DET_EVENTS, tmp)
        if frames is None or events is None:
            continue
        row = rep.runs[rep.runs.run_id == run_id].iloc[0]
        threshold = row.get("metrics.alarm/threshold")
        curves[v] = (frames, events, None if threshold is None or threshold != threshold else float(threshold))
    if not curves:
        return None
    return det_plot(curves, path, title="detection error trade-off (one run per variant; dots: budget thresholds)")


def learning_curves(rep, uri: str, path: Path, metric: str) -> Path:
    from ..tracking.client import metric_history

    rows = []
    for _, r in rep.runs.iterrows():
        for name in (metric, "train_loss"):
            hist = metric_history(uri, r.run_id, name)
            seen = set()
            for m in sorted(hist, key=lambda m: (m.step, m.timestamp)):
                if m.step in seen:  # the final value is logged again at the last step
                    continue
                seen.add(m.step)
                rows.append({"variant": r.variant, "seed": r.seed, "epoch": m.step, "metric": name,
                             "value": m.value})
    return save_figure(learning_figure(pd.DataFrame(rows), metric), path, 110)


def learning_figure(df: pd.DataFrame, metric: str):
    """``metric`` and the training loss per epoch, mean over seeds with a 95% band, per variant
    (``df``: columns variant, seed, epoch, metric, value)."""
    sns.set_theme(style="whitegrid")
    fig, axes = plt.subplots(1, 2, figsize=(11, 3.8))
    for ax, name in zip(axes, (metric, "train_loss")):
        sub = df[df.metric == name] if len(df) else df
        if len(sub):
            sns.lineplot(data=sub, x="epoch", y="value", hue="variant", ax=ax, errorbar=("ci", 95))
        ax.set(title=f"{name} per epoch (mean over seeds, 95% band)", ylabel=name)
        if ax.get_legend():
            ax.get_legend().set_title("")
            for t in ax.get_legend().get_texts():
                t.set_fontsize(7)
    fig.tight_layout()
    plt.close(fig)   # shown once, by the returned Figure's own display
    return fig


def timelines(scores: dict[str, pd.DataFrame], path: Path, n_videos: int = 4) -> Path:
    return save_figure(timelines_figure(scores, n_videos), path, 110)


def timelines_figure(scores: dict[str, pd.DataFrame], n_videos: int = 4):
    """The same test videos' scores for each variant (``scores``: variant -> frame table)."""
    first = next(iter(scores.values()))
    per = first.groupby("video").agg(anom=("label", "max"))
    videos = list(per[per.anom == 1].index[: n_videos - 1]) + list(per[per.anom <= 0].index[:1])
    sns.set_theme(style="white")
    fig, axes = plt.subplots(len(videos), 1, figsize=(9, 1.6 * len(videos) + 0.8), squeeze=False)
    palette = sns.color_palette("tab10", len(scores))
    for ax, v in zip(axes[:, 0], videos):
        base = first[first.video == v]
        ax.fill_between(base.frame, 0, 1, where=base.label > 0, color="tab:red", alpha=0.15,
                        step="post", label="ground truth")
        for (name, df), col in zip(scores.items(), palette):
            d = df[df.video == v]
            ax.plot(d.frame, d.score, lw=1.0, color=col, label=name)
        ax.set_ylim(-0.02, 1.02)
        ax.set_title(v, fontsize=8, loc="left")
        ax.tick_params(labelsize=7)
    axes[0, 0].legend(fontsize=6, loc="upper right", ncol=2)
    axes[-1, 0].set_xlabel("frame")
    fig.tight_layout()
    plt.close(fig)   # shown once, by the returned Figure's own display
    return fig


def all_plots(rep, out: Path, tracking_uri: str | None, headline: str) -> dict[str, Path]:
    paths = {}
    if headline in set(rep.table.metric):
        paths["metric_plot"] = metric_plot(rep, headline, out / f"{headline}_by_variant.png")
    if tracking_uri is None:
        return paths
    with tempfile.TemporaryDirectory(prefix="wsad-report-") as name:   # downloads go when done
        return paths | _tracked_plots(rep, out, tracking_uri, headline, Path(name))


def _tracked_plots(rep, out: Path, tracking_uri: str, headline: str, tmp: Path) -> dict[str, Path]:
    paths = {}
    scores = {}
    for v, run_id in _one_run_per_variant(rep).items():
        df = _artifact(tracking_uri, run_id, "scores/test_scores.parquet", tmp)
        if df is not None:
            scores[v] = df
    if scores:
        curves = {v: (d[d.label >= 0].label.to_numpy(), d[d.label >= 0].score.to_numpy())
                  for v, d in scores.items()}
        paths["roc"] = roc_plot(curves, out / "roc_overlay.png", title="frame-level ROC (one run per variant)")
        paths["timelines"] = timelines(scores, out / "timelines.png")
    det = det_overlay(rep, tracking_uri, tmp, out / "det_overlay.png")
    if det is not None:
        paths["det"] = det
    paths["learning_curves"] = learning_curves(rep, tracking_uri, out / "learning_curves.png", headline)
    return paths
