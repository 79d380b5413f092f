"""Operating points of a finished run: the alarm threshold for a false-alarm budget (chosen on
held-out normal *training* videos, no test label), the event-level results at it, the DET
trade-off over all thresholds, and the same model scored on other sites' stores (transfer)."""
from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pandas as pd
from omegaconf import DictConfig, OmegaConf

from ..data.scoring import score_videos
from ..errors import WsadError
from ..evaluate import frame_table, video_scores
from ..evaluate.alarms import (
    AlarmRules,
    budget_threshold,
    event_metrics,
    event_tradeoff,
    metrics_at,
    timelines,
    timelines_from_table,
)
from ..evaluate.det import DET_EVENTS, DET_FRAMES, det_points
from ..files import atomic_path
from ..store import FeatureStore
from ..store.format import segments_to_frames
from .export import quiet_metrics
from .setup import Setup, draws_plots

HELD_NORMAL = "scores/heldout_normal_scores.parquet"   # frame scores the budget threshold is chosen on


def alarm_rules(cfg: DictConfig, fps: float) -> AlarmRules:
    """``evaluate.min_alarm_s`` and ``evaluate.merge_gap_s`` in frames at ``fps``."""
    ev = cfg.get("evaluate") or {}
    return AlarmRules(max(1, round(float(ev.get("min_alarm_s", 0.0)) * fps)),
                      round(float(ev.get("merge_gap_s", 0.0)) * fps))


def _events(store: FeatureStore) -> dict[str, np.ndarray]:
    return {v: g[["start", "end"]].to_numpy() for v, g in store.events.groupby("video")}


def _write_csv(df: pd.DataFrame, path: Path) -> None:
    with atomic_path(path) as tmp:   # makes the folder too
        df.to_csv(tmp, index=False)


def _write_parquet(df: pd.DataFrame, path: Path) -> None:
    with atomic_path(path) as tmp:
        df.to_parquet(tmp, index=False)


def alarm_metrics(cfg: DictConfig, s: Setup, held: dict, test, write: bool = True) -> tuple[dict, float | None]:
    """``alarm/*`` at the threshold that keeps the held-out normal *training* videos (their
    segment scores in ``held``) within ``evaluate.budget`` alarms per camera-hour, and that
    threshold (None when skipped, with one line: no fps, or no normal video held out).
    ``write``: also write ``scores/alarms_per_camera.csv``, the DET points and ``plots/det.png``."""
    if s.store.fps is None:
        warnings.warn("alarm metrics skipped: store.json has no fps (set it with wsad-index --fps or "
                      "the store.json key \"fps\")", stacklevel=2)
        return {}, None
    normal = [v for v in s.val_videos if s.store.label(v) == 0]
    if not normal:
        warnings.warn("alarm metrics skipped: no normal training video is held out for weak validation",
                      stacklevel=2)
        return {}, None
    fps, rules = s.store.fps, alarm_rules(cfg, s.store.fps)
    frames = [segments_to_frames(held[v], s.store.frames(v), s.store.segment_frames) for v in normal]
    budget = float((cfg.get("evaluate") or {}).get("budget", 1.0))
    threshold = budget_threshold(frames, fps, budget, rules)
    hours = sum(len(f) for f in frames) / fps / 3600.0
    if budget * hours < 1:  # fewer than one alarm allowed: the budget means "none at all" here
        warnings.warn(f"evaluate.budget={budget:g} alarms per camera-hour cannot be told from 0 on "
                      f"{hours:.2f} h of held-out normal training footage (the threshold allows no alarm "
                      f"there); hold out more normal video (trainer.weak_val_share) or raise the budget",
                      stacklevel=2)
    tl = timelines(test, _events(s.store))   # frame scores expanded once for all that follows
    metrics, rows = metrics_at(tl, threshold, fps, rules)
    metrics["alarm/normal_hours"] = hours
    if not write:
        return metrics, threshold
    _write_csv(pd.DataFrame(rows), s.out_dir / "scores" / "alarms_per_camera.csv")
    _write_parquet(frame_table(video_scores(s.store, {v: held[v] for v in normal})), s.out_dir / HELD_NORMAL)
    write_det(s.out_dir, tl, fps, rules, threshold, str(cfg.get("recipe_name", "model")), draws_plots(cfg))
    return metrics, threshold


def write_det(out_dir: Path, tl: list[tuple], fps: float, rules: AlarmRules, threshold: float,
              name: str, plot: bool = True) -> None:
    """The DET points of the test ``tl`` (:func:`~wsad.evaluate.alarms.timelines`; frames: every
    distinct score; events: a grid of thresholds and the budget threshold) as CSV, and their plot
    with the budget threshold marked."""
    y = np.concatenate([t[2] for t in tl]) if tl else np.zeros(0, bool)
    if not len(y) or y.all() or not y.any():
        return  # a DET curve needs anomalous and normal test frames
    fpr, fnr, thr = det_points(np.concatenate([t[1] for t in tl]), y)
    frames = pd.DataFrame({"threshold": thr, "fpr": fpr, "fnr": fnr})
    ev = event_tradeoff(tl, fps, rules, extra=[threshold])
    _write_csv(frames, out_dir / DET_FRAMES)
    _write_csv(ev, out_dir / DET_EVENTS)
    if plot:
        from ..evaluate.plots import det_plot  # matplotlib only when plots are drawn

        det_plot({name: (frames, ev, threshold)}, out_dir / "plots" / "det.png",
                 title=f"detection error trade-off, {name} (dot: budget threshold)")


# --- transfer to other sites ----------------------------------------------------------------
def transfer_stores(cfg: DictConfig) -> list[tuple[str, FeatureStore]]:
    """The stores of ``evaluate.stores``, named by folder (made unique), checked against the
    training store's feature dim before any training starts."""
    paths = list((cfg.get("evaluate") or {}).get("stores") or [])
    if not paths:
        return []
    dim = FeatureStore(cfg.data.root).dim
    out, names = [], set()
    for p in paths:
        if not Path(str(p)).is_dir():
            raise WsadError(f"evaluate.stores: {p} is not a folder (give feature stores, e.g. made by wsad-synth)")
        store = FeatureStore(str(p), crops=cfg.data.crops)
        if store.dim != dim:
            raise WsadError(f"evaluate.stores: {p} has {store.dim}-d features but the training store "
                            f"{cfg.data.root} has {dim}-d; transfer needs the same backbone's features")
        if not store.videos("test"):
            raise WsadError(f"evaluate.stores: {p} has no test videos to score")
        name, k = Path(str(p)).resolve().name, 2
        while name in names:
            name, k = f"{Path(str(p)).resolve().name}_{k}", k + 1
        names.add(name)
        out.append((name, store))
    return out


def transfer_metrics(cfg: DictConfig, s: Setup, stores: list[tuple[str, FeatureStore]],
                     threshold: float | None, write: bool = True) -> dict:
    """The selected model on each other store's test split, with the *training* store's
    standardiser and budget threshold: ``transfer/<name>/<metric>``; with ``write``, a table
    of them in ``scores/transfer.csv`` and each store's frame scores beside it."""
    out, rows = {}, []
    for name, store in stores:
        test = video_scores(store, score_videos(s.model, store, store.videos("test"), s.std, s.bags.chunks))
        if write:
            _write_parquet(frame_table(test), s.out_dir / "scores" / "transfer" / f"{name}.parquet")
        metrics = quiet_metrics(test)
        if threshold is not None and store.fps is not None:
            metrics.update(event_metrics(test, _events(store), threshold, store.fps,
                                         alarm_rules(cfg, store.fps))[0])
        elif threshold is not None:
            warnings.warn(f"transfer to {name}: alarm metrics skipped, its store.json has no fps", stacklevel=2)
        out.update({f"transfer/{name}/{k}": v for k, v in metrics.items()})
        rows.append({"store": name, "path": str(store.root), **metrics})
    if rows and write:
        _write_csv(pd.DataFrame(rows), s.out_dir / "scores" / "transfer.csv")
    return out


# --- other budgets after the fact -----------------------------------------------------------
def budget_table(run_dir: str | Path, budgets, on: str | None = None) -> pd.DataFrame:
    """The operating point of a finished run at each of ``budgets`` (alarms per camera-hour),
    from its exported scores, without retraining: the threshold on its held-out normal training
    videos, and the ``alarm/*`` results on its test split, or with ``on`` a transfer store's
    name, on that store's test split (at the *training* site's threshold)."""
    run = Path(run_dir)
    if not (run / HELD_NORMAL).is_file():
        raise WsadError(f"{run} has no {HELD_NORMAL}: the run had no fps or no held-out normal video")
    cfg = OmegaConf.load(run / "config" / "resolved.yaml")
    train_store = FeatureStore(str(cfg.data.root))
    if on is None:
        store, table = train_store, pd.read_parquet(run / "scores" / "test_scores.parquet")
    else:
        known = pd.read_csv(run / "scores" / "transfer.csv") if (run / "scores" / "transfer.csv").is_file() else None
        if known is None or on not in set(known.store):
            names = ", ".join(known.store) if known is not None else "none"
            raise WsadError(f"{run} has no transfer store {on!r}; it has: {names}")
        store = FeatureStore(str(known.set_index("store").loc[on, "path"]))
        table = pd.read_parquet(run / "scores" / "transfer" / f"{on}.parquet")
    if store.fps is None:
        raise WsadError(f"{store.root} has no fps in store.json: alarms per hour need it")
    held = pd.read_parquet(run / HELD_NORMAL)
    normal = [g.sort_values("frame")["score"].to_numpy() for _, g in held.groupby("video", sort=False)]
    timelines = timelines_from_table(table, _events(store))
    hours = sum(len(x) for x in normal) / train_store.fps / 3600.0
    rows = []
    for b in budgets:
        threshold = budget_threshold(normal, train_store.fps, float(b), alarm_rules(cfg, train_store.fps))
        m, _ = metrics_at(timelines, threshold, store.fps, alarm_rules(cfg, store.fps))
        rows.append({"budget": float(b), "normal_hours": hours,
                     **{k.removeprefix("alarm/"): v for k, v in m.items()}})
    return pd.DataFrame(rows)
