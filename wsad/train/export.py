"""The artifacts of a finished run (DESIGN names): scores parquet, ROC and
timeline plots (when ``trainer.plots`` asks), resolved config, checkpoint; plus the
learning-curve table."""
from __future__ import annotations

import warnings
from pathlib import Path

import pandas as pd
from omegaconf import DictConfig, OmegaConf

from ..checkpoint import save_checkpoint
from ..evaluate import VideoScores, compute_metrics, frame_table
from ..files import atomic_path
from .setup import Setup, draws_plots


def quiet_metrics(videos: list[VideoScores]) -> dict[str, float]:
    """The DESIGN metrics, without the per-epoch warnings about missing events."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return compute_metrics(videos)


def export(out_dir: Path, cfg: DictConfig, s: Setup, test: list[VideoScores], history: list[dict]) -> None:
    for sub in ("scores", "config", "model"):
        (out_dir / sub).mkdir(parents=True, exist_ok=True)
    table = frame_table(test)
    with atomic_path(out_dir / "scores" / "test_scores.parquet") as tmp:
        table.to_parquet(tmp, index=False)
    pd.DataFrame(history).to_csv(out_dir / "scores" / "history.csv", index=False)
    if draws_plots(cfg):
        _plots(out_dir, str(cfg.get("recipe_name", "model")), table, test)
    (out_dir / "config" / "resolved.yaml").write_text(OmegaConf.to_yaml(cfg, resolve=True))
    save_checkpoint(out_dir / "model" / "checkpoint.pt", s.model, cfg, s.std, s.store.dim)


def _plots(out_dir: Path, name: str, table: pd.DataFrame, test: list[VideoScores]) -> None:
    from ..evaluate.plots import roc_plot, timeline_plot  # matplotlib only when plots are drawn

    lab = table[table["label"] >= 0]
    if lab["label"].nunique() == 2:
        roc_plot({name: (lab["label"].to_numpy(), lab["score"].to_numpy())},
                 out_dir / "plots" / "roc.png", title=f"frame-level ROC, {name}")
    timeline_plot(test, out_dir / "plots" / "timelines.png", title=f"test videos, {name}")
