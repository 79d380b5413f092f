"""The run folder: scores, tables, plots when asked, the config, the checkpoint and a
``summary.json`` with every final metric, its interval, the settings' fingerprint and the
warnings. Every file is written through a temporary name and a rename."""
from __future__ import annotations

import json
import math
from pathlib import Path

import pandas as pd
from omegaconf import OmegaConf

from ..checkpoint import save_checkpoint
from ..evaluate import Evaluation
from ..evaluate.catalogue import CATALOGUE
from ..evaluate.det import DET_EVENTS, DET_FRAMES
from ..files import atomic_path
from ..timeline import mark
from ..tracking.params import settings_fingerprint
from .base import Outcome, Sink

SUMMARY = "summary.json"
TEST_SCORES = "scores/test_scores.parquet"
HELDOUT_SCORES = "scores/heldout_scores.parquet"   # the held-out training videos the thresholds are set on
HISTORY = "scores/history.csv"
CAMERAS = "scores/alarms_per_camera.csv"
TRANSFER = "scores/transfer.csv"


def write_table(df: pd.DataFrame, path: Path) -> Path:
    """A table as parquet or CSV (by suffix), atomically (the folder is made too)."""
    with atomic_path(path) as tmp:
        df.to_parquet(tmp, index=False) if path.suffix == ".parquet" else df.to_csv(tmp, index=False)
    return path


def write_text(text: str, path: Path) -> Path:
    with atomic_path(path) as tmp:
        tmp.write_text(text)
    return path


def write_evaluation(out: Path, ev: Evaluation, name: str, plots: bool) -> None:
    """The files of an evaluation: test (and held-out) scores, the per-camera alarms, DET points,
    transfer scores and table, and with ``plots`` roc.png, timelines.png and det.png."""
    out = Path(out)
    write_table(ev.test_table(), out / TEST_SCORES)
    if ev.heldout:
        write_table(ev.heldout_table(), out / HELDOUT_SCORES)
    if ev.cameras is not None:
        write_table(ev.cameras, out / CAMERAS)
    if ev.det_frames is not None:
        write_table(ev.det_frames, out / DET_FRAMES)
        write_table(ev.det_events, out / DET_EVENTS)
    for t in ev.transfer:
        write_table(t.table(), out / "scores" / "transfer" / f"{t.name}.parquet")
    if ev.transfer:
        write_table(ev.transfer_table(), out / TRANSFER)
    if plots:
        mark("files")
        draw_plots(out, ev, name)
        mark("plots")


def write_summary(out: Path, metrics: dict, ev: Evaluation, **about) -> Path:
    """``summary.json``: every final metric with its interval (catalogue order first), the
    evaluation settings, the warnings, and ``about`` (name, run id, fingerprints)."""
    return write_text(json.dumps(summary(metrics, ev, **about), indent=1, default=str) + "\n", Path(out) / SUMMARY)


class FolderSink(Sink):
    """Writes a finished run into its folder (``outcome.out_dir``)."""

    def publish(self, o: Outcome) -> None:
        out = Path(o.out_dir)
        write_evaluation(out, o.evaluation, o.name, o.plots)
        write_table(pd.DataFrame(o.history), out / HISTORY)
        write_text(OmegaConf.to_yaml(o.config, resolve=True), out / "config" / "resolved.yaml")
        save_checkpoint(out / "model" / "checkpoint.pt", o.scorer, o.config, o.dim)
        write_summary(out, o.metrics, o.evaluation, name=o.name, run_id=o.run_id,
                      store_fingerprint=o.store_fingerprint,
                      settings_fingerprint=settings_fingerprint(o.config, o.store_fingerprint), warnings=o.warnings)


def summary(metrics: dict, ev: Evaluation, warnings: list[str] | None = None, **about) -> dict:
    """Every final metric with its interval (catalogue order first), the settings, the warnings."""
    m = metrics
    names = [n for n in CATALOGUE if n in m] + sorted(k for k in m if k not in CATALOGUE and not _bound(k, m))
    out = {}
    for n in names:
        entry = {"value": _num(m[n])}
        if f"{n}_lo" in m:
            entry.update(lo=_num(m[f"{n}_lo"]), hi=_num(m[f"{n}_hi"]))
        out[n] = entry
    return {"format": 1, **about, "evaluation": ev.settings.as_dict(), "metrics": out,
            "warnings": list(ev.warnings if warnings is None else warnings)}


def _bound(key: str, m: dict) -> bool:
    """``<name>_lo`` / ``<name>_hi`` of a metric that is itself in ``m`` (kept with it)."""
    return key.endswith(("_lo", "_hi")) and key[:-3] in m


def _num(x) -> float | None:
    x = float(x)
    return None if math.isnan(x) else x


def draw_plots(out: Path, ev: Evaluation, name: str) -> None:
    """roc.png, timelines.png and det.png (matplotlib only when plots are drawn)."""
    from ..evaluate.plots import det_plot, roc_plot, timeline_plot

    table = ev.test_table()
    lab = table[table["label"] >= 0]
    if lab["label"].nunique() == 2:
        roc_plot({name: (lab["label"].to_numpy(), lab["score"].to_numpy())},
                 out / "plots" / "roc.png", title=f"frame-level ROC, {name}")
    timeline_plot(ev.test.videos, out / "plots" / "timelines.png", title=f"test videos, {name}")
    if ev.det_frames is not None:
        det_plot({name: (ev.det_frames, ev.det_events, ev.threshold)}, out / "plots" / "det.png",
                 title=f"detection error trade-off, {name} (dot: budget threshold)")
