"""Other budgets after the fact: a finished run's operating point at any false-alarm budget,
from its exported scores, without retraining."""
from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
from omegaconf import OmegaConf

from ..errors import WsadError
from ..evaluate import EvaluationSettings, store_events
from ..evaluate.alarms import budget_threshold, metrics_at, timelines_from_table
from ..store import FeatureStore
from .folder import HELDOUT_SCORES, SUMMARY, TEST_SCORES, TRANSFER


def run_settings(summary: dict) -> EvaluationSettings:
    """The evaluation settings a run's ``summary.json`` records."""
    return EvaluationSettings(**summary["evaluation"])


def run_rules(summary: dict, fps: float):
    """The alarm rules of a run at ``fps``."""
    return run_settings(summary).rules(fps)


def budget_table(run_dir: str | Path, budgets, on: str | None = None) -> pd.DataFrame:
    """The operating point of a finished run at each of ``budgets`` (alarms per camera-hour):
    the threshold on its held-out normal training videos, and the ``alarm/*`` results on its
    test split, or with ``on`` a transfer store's name, on that store's test split (at the
    *training* site's threshold)."""
    run = Path(run_dir)
    if not (run / SUMMARY).is_file():
        raise WsadError(f"{run} is not a finished run's folder (no {SUMMARY})")
    cfg = OmegaConf.load(run / "config" / "resolved.yaml")
    settings = run_settings(json.loads((run / SUMMARY).read_text()))
    held = pd.read_parquet(run / HELDOUT_SCORES) if (run / HELDOUT_SCORES).is_file() else None
    if held is not None:   # normal videos: every frame labelled 0 (an anomalous one has 1s, or -1 without events)
        held = held[held.groupby("video")["label"].transform("max") == 0]
    if held is None or held.empty or settings.heldout_fitted:
        raise WsadError(f"{run} has no held-out normal training video to set a threshold on")
    train_store = FeatureStore(str(cfg.data.root))
    if on is None:
        store, table = train_store, pd.read_parquet(run / TEST_SCORES)
    else:
        known = pd.read_csv(run / TRANSFER) if (run / TRANSFER).is_file() else None
        if known is None or on not in set(known.store):
            names = ", ".join(known.store) if known is not None else "none"
            raise WsadError(f"{run} has no transfer store {on!r}; it has: {names}")
        store = FeatureStore(str(known.set_index("store").loc[on, "path"]))
        table = pd.read_parquet(run / "scores" / "transfer" / f"{on}.parquet")
    if store.fps is None or train_store.fps is None:
        raise WsadError(f"{store.root} has no fps in store.json: alarms per hour need it")
    normal = [g.sort_values("frame")["score"].to_numpy() for _, g in held.groupby("video", sort=False)]
    timelines = timelines_from_table(table, store_events(store))
    hours = sum(len(x) for x in normal) / train_store.fps / 3600.0
    rows = []
    for b in budgets:
        threshold = budget_threshold(normal, train_store.fps, float(b), settings.rules(train_store.fps))
        m, _ = metrics_at(timelines, threshold, store.fps, settings.rules(store.fps))
        rows.append({"budget": float(b), "normal_hours": hours,
                     **{k.removeprefix("alarm/"): v for k, v in m.items()}})
    return pd.DataFrame(rows)
