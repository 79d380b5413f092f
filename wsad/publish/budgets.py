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


class BudgetPoint:
    """A finished run's operating point as a function of the budget: the threshold on its
    held-out normal training videos and the ``alarm/*`` results on its test split (or, with
    ``on``, a transfer store's test split, at the *training* site's threshold)."""

    def __init__(self, run_dir: str | Path, on: str | None = None):
        run = Path(run_dir)
        if not (run / SUMMARY).is_file():
            raise WsadError(f"{run} is not a finished run's folder (no {SUMMARY})")
        cfg = OmegaConf.load(run / "config" / "resolved.yaml")
        self.settings = run_settings(json.loads((run / SUMMARY).read_text()))
        held = pd.read_parquet(run / HELDOUT_SCORES) if (run / HELDOUT_SCORES).is_file() else None
        if held is not None:   # normal videos: every frame labelled 0 (anomalous: some 1s, or -1 without events)
            held = held[held.groupby("video")["label"].transform("max") == 0]
        if held is None or held.empty or self.settings.heldout_fitted:
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
        self.normal = [g.sort_values("frame")["score"].to_numpy() for _, g in held.groupby("video", sort=False)]
        self.timelines = timelines_from_table(table, store_events(store))
        self.fps, self.test_fps = train_store.fps, store.fps
        self.hours = sum(len(x) for x in self.normal) / self.fps / 3600.0

    def at(self, budget: float) -> tuple[dict[str, float], list[dict]]:
        """``alarm/*`` metrics and per-camera rows at the threshold for ``budget``."""
        threshold = budget_threshold(self.normal, self.fps, float(budget), self.settings.rules(self.fps))
        return metrics_at(self.timelines, threshold, self.test_fps, self.settings.rules(self.test_fps))


def budget_table(run_dir: str | Path, budgets, on: str | None = None) -> pd.DataFrame:
    """The operating point of a finished run at each of ``budgets`` (alarms per camera-hour):
    the threshold on its held-out normal training videos, and the ``alarm/*`` results on its
    test split, or with ``on`` a transfer store's name, on that store's test split (at the
    *training* site's threshold)."""
    point = BudgetPoint(run_dir, on)
    rows = []
    for b in budgets:
        m, _ = point.at(b)
        rows.append({"budget": float(b), "normal_hours": point.hours,
                     **{k.removeprefix("alarm/"): v for k, v in m.items()}})
    return pd.DataFrame(rows)
