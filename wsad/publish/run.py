"""A finished run as an object: what ``wsad.train.train`` returns and ``wsad.load_run`` reads
back from a run folder (or an MLflow run id). Metrics with intervals, the history and the scores
as typed DataFrames, figures, the operating point at other budgets, and a summary card."""
from __future__ import annotations

import json
import math
from functools import cached_property
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import WsadError
from ..evaluate.catalogue import CATALOGUE, lead
from .folder import HELDOUT_SCORES, HISTORY, SUMMARY, TEST_SCORES

#: The test-score table's columns and types.
SCORE_TYPES = {"video": "string", "frame": "int64", "score": "float32", "label": "int8", "group": "string"}


class Run:
    """A finished run. ``metrics``: every logged final metric by name (``metric_table``: the
    same with intervals, direction and meaning); ``history``: one row per epoch; ``scores``:
    the selected model's test frame scores; ``warnings``: what the run said."""

    def __init__(self, folder: str | Path, metrics: dict | None = None, history=None, run_id: str | None = None,
                 objective: float | None = None, evaluation=None, warnings: list[str] | None = None):
        self.folder = Path(folder)
        self._metrics, self._history = metrics, history
        self.run_id, self.objective, self.evaluation = run_id, objective, evaluation
        self._warnings = warnings

    # --- reading a folder back ----------------------------------------------------------------
    @classmethod
    def from_folder(cls, folder: str | Path) -> Run:
        folder = Path(folder)
        if not (folder / SUMMARY).is_file():
            raise WsadError(f"{folder} is not a finished run's folder (no {SUMMARY}); give a run folder "
                            "(trainer.out_dir or Hydra's output folder) or an MLflow run id")
        return cls(folder)

    @cached_property
    def summary(self) -> dict:
        return json.loads((self.folder / SUMMARY).read_text())

    @property
    def out_dir(self) -> Path:
        return self.folder

    @property
    def metrics(self) -> dict[str, float]:
        if self._metrics is None:
            m = {}
            for name, e in self.summary["metrics"].items():
                m[name] = math.nan if e["value"] is None else e["value"]
                if "lo" in e:
                    m[f"{name}_lo"], m[f"{name}_hi"] = (math.nan if e[k] is None else e[k] for k in ("lo", "hi"))
            self._metrics = m
        return self._metrics

    @property
    def warnings(self) -> list[str]:
        return list(self.summary["warnings"]) if self._warnings is None else self._warnings

    @property
    def name(self) -> str:
        return str(self.summary.get("name", self.folder.name))

    @cached_property
    def metric_table(self) -> pd.DataFrame:
        """One row per final metric: value, interval (NaN where none), better (higher/lower),
        unit and meaning, in catalogue order."""
        m, rows = self.metrics, []
        names = [n for n in CATALOGUE if n in m] + [k for k in m if k not in CATALOGUE and not _bound(k, m)]
        for n in names:
            c = CATALOGUE.get(n)
            rows.append({"metric": n, "value": float(m[n]), "lo": float(m.get(f"{n}_lo", math.nan)),
                         "hi": float(m.get(f"{n}_hi", math.nan)),
                         "better": {1: "higher", -1: "lower", 0: ""}[c.direction] if c else "",
                         "unit": c.unit if c else "", "meaning": c.meaning if c else ""})
        return pd.DataFrame(rows).astype({"metric": "string", "better": "string", "unit": "string",
                                          "meaning": "string"})

    @property
    def history(self) -> pd.DataFrame:
        if self._history is None:
            self._history = pd.read_csv(self.folder / HISTORY)
        elif not isinstance(self._history, pd.DataFrame):
            self._history = pd.DataFrame(self._history)
        return self._history

    @cached_property
    def scores(self) -> pd.DataFrame:
        """Test frame scores: video, frame, score, label (1, 0, or -1: no events), group."""
        return _typed(pd.read_parquet(self.folder / TEST_SCORES))

    @cached_property
    def heldout_scores(self) -> pd.DataFrame | None:
        path = self.folder / HELDOUT_SCORES
        return _typed(pd.read_parquet(path)) if path.is_file() else None

    @cached_property
    def config(self):
        from omegaconf import OmegaConf

        return OmegaConf.load(self.folder / "config" / "resolved.yaml")

    @cached_property
    def store(self):
        from ..store import FeatureStore

        return FeatureStore(str(self.config.data.root))

    @property
    def threshold(self) -> float | None:
        t = self.metrics.get("alarm/threshold")
        return None if t is None or t != t else float(t)

    # --- figures and tables ---------------------------------------------------------------------
    def timeline(self, video: str | None = None, threshold: float | None = None):
        """One test video's scores against its ground truth, the alarm threshold and the alarms it
        raises (default: the run's operating point; x in seconds when the store has an fps)."""
        from ..evaluate.alarms import alarm_runs
        from ..evaluate.plots import timeline_figure
        from .budgets import run_rules

        videos = list(dict.fromkeys(self.scores.video))
        video = video or next((v for v in videos if (self.scores[self.scores.video == v].label == 1).any()),
                              videos[0])
        if video not in videos:
            raise WsadError(f"no test video {video!r} in this run; e.g. {', '.join(videos[:3])}")
        g = self.scores[self.scores.video == video].sort_values("frame")
        threshold = self.threshold if threshold is None else threshold
        fps = self.store.fps
        alarms = None
        if threshold is not None and fps:
            alarms = {self.name: alarm_runs(g.score.to_numpy() >= threshold, run_rules(self.summary, fps))}
        label = g.label.to_numpy()
        camera = g.group.iloc[0]
        return timeline_figure({self.name: g.score.to_numpy()}, np.where(label > 0, 1, 0),
                               f"{video} (camera {camera})", fps, threshold, alarms)

    def roc(self):
        from ..evaluate.plots import roc_figure

        known = self.scores[self.scores.label >= 0]
        return roc_figure({self.name: (known.label.to_numpy(), known.score.to_numpy())},
                          f"frame-level ROC, {self.name}")

    def det(self):
        """The DET curves (frames and events) with the operating point marked."""
        from ..evaluate.det import DET_EVENTS, DET_FRAMES
        from ..evaluate.plots import det_figure

        if not (self.folder / DET_FRAMES).is_file():
            raise WsadError(f"{self.folder} has no DET points (no fps or no held-out normal video)")
        curves = {self.name: (pd.read_csv(self.folder / DET_FRAMES), pd.read_csv(self.folder / DET_EVENTS),
                              self.threshold)}
        return det_figure(curves, f"detection error trade-off, {self.name} (dot: budget threshold)")

    def budget_table(self, budgets, on: str | None = None) -> pd.DataFrame:
        """The operating point at other false-alarm budgets, from the exported scores."""
        from .budgets import budget_table

        return budget_table(self.folder, budgets, on)

    # --- display ----------------------------------------------------------------------------------
    def card(self) -> dict:
        """The facts the summary card shows."""
        m, primary = self.metrics, lead()
        out = {"run": self.name, "folder": str(self.folder), "MLflow run": self.run_id or self.summary.get("run_id"),
               "selected epoch": m.get("selected_epoch")}
        if primary in m:
            out[primary] = _with_interval(m, primary)
        if self.threshold is not None:
            out["operating point"] = (f"threshold {m['alarm/threshold']:.3f}: event recall "
                                      f"{m.get('alarm/event_recall', math.nan):.3f}, "
                                      f"{m.get('alarm/false_per_hour', math.nan):.2f} false alarms per hour")
        return out

    def __repr__(self) -> str:
        lines = [f"{k}: {v}" for k, v in self.card().items() if v is not None]
        lines += [f"warning: {w}" for w in self.warnings]
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        from html import escape

        rows = "".join(f"<tr><th style='text-align:left'>{escape(str(k))}</th><td style='text-align:left'>"
                       f"{escape(str(v))}</td></tr>" for k, v in self.card().items() if v is not None)
        warn = "".join(f"<li>{escape(w)}</li>" for w in self.warnings)
        return (f"<div><table>{rows}</table>" + (f"<p><b>Warnings</b></p><ul>{warn}</ul>" if warn else "")
                + "</div>")


def _typed(df: pd.DataFrame) -> pd.DataFrame:
    return df.astype({k: v for k, v in SCORE_TYPES.items() if k in df.columns})


def _with_interval(m: dict, name: str) -> str:
    text = f"{m[name]:.3f}"
    return text + (f" [{m[name + '_lo']:.3f}, {m[name + '_hi']:.3f}]" if f"{name}_lo" in m else "")


def _bound(key: str, m: dict) -> bool:
    return key.endswith(("_lo", "_hi")) and key[:-3] in m


def load_run(run: str | Path) -> Run:
    """A finished run from its folder, or from its MLflow run id (``tracking_uri`` from the
    environment's ``MLFLOW_TRACKING_URI`` or ``sqlite:///mlruns.db``): its local folder when this
    machine has it, else its artifacts downloaded."""
    if Path(str(run)).is_dir():
        return Run.from_folder(run)
    import os
    import tempfile

    from ..tracking import resolve_uri
    from ..tracking.client import download, get_run

    uri = resolve_uri(os.environ.get("MLFLOW_TRACKING_URI") or "sqlite:///mlruns.db")
    found = get_run(uri, str(run))
    state = found.data.tags.get("wsad.resume_checkpoint")
    if state and (Path(state).parent.parent / SUMMARY).is_file():
        out = Run.from_folder(Path(state).parent.parent)
    else:
        folder = Path(tempfile.mkdtemp(prefix=f"wsad-run-{run}-"))
        for part in (SUMMARY, "scores", "config", "plots"):
            download(uri, str(run), part, folder)
        out = Run.from_folder(folder)
    out.run_id = str(run)
    return out
