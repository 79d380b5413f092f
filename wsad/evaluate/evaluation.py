"""Evaluation as a pure function: test scores (+ the held-out training videos' scores, the
store's events and fps, other stores' test scores) in, an :class:`Evaluation` out.

Nothing here writes a file, logs or draws: a run, ``wsad.evaluate_scores`` and
``wsad-evaluate`` all call :func:`evaluate` and hand the result to their sinks. Warnings
raised on the way are returned in ``Evaluation.warnings``, not printed.
"""
from __future__ import annotations

import json
import warnings
from dataclasses import dataclass, field, fields
from functools import cached_property
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import WsadError
from .alarms import (
    AlarmRules,
    budget_threshold,
    count_alarms,
    event_tradeoff,
    hours_needed,
    metrics_at,
    rate_upper_bound,
    timelines,
)
from .bootstrap import UNITS
from .catalogue import compute_metrics
from .decision import THRESHOLD_RULES, choose_video_threshold, video_decision
from .det import det_points
from .intervals import INTERVALS, grouped_bootstrap, macro_auc_interval
from .metrics import VideoScores, frame_table

#: Below this many test cameras every interval is approximate: the run says so, with the coverage
#: measured for that size (docs/results/coverage.md).
FEW_CAMERAS = 10
MEASURED = Path(__file__).with_name("coverage_measured.json")


@dataclass(frozen=True)
class EvaluationSettings:
    """How scores are evaluated (the run's ``trainer.bootstrap*``, ``trainer.interval``,
    ``seed`` and ``evaluate.*`` keys). ``heldout_fitted``: the held-out scores are of videos
    the model was fitted on (a run without weak validation): they still set the video
    threshold, but no alarm budget is set on footage the model has seen."""

    bootstrap: int = 1000
    bootstrap_by: str | None = None
    interval: str = "jackknife"
    seed: int = 0
    budget: float = 1.0
    min_alarm_s: float = 0.0
    merge_gap_s: float = 0.0
    budget_confidence: float | None = None
    heldout_fitted: bool = False
    video_threshold_rule: str = "balanced_accuracy"

    def __post_init__(self):
        if self.bootstrap < 0:
            raise WsadError(f"bootstrap={self.bootstrap}; use 0 (no intervals) or a number of resamples")
        if self.bootstrap_by not in (*UNITS, None):
            raise WsadError(f"bootstrap_by={self.bootstrap_by!r}; use one of {list(UNITS)} or null")
        if self.interval not in INTERVALS:
            raise WsadError(f"interval={self.interval!r}; use one of {list(INTERVALS)}")
        if self.budget < 0:
            raise WsadError(f"evaluate.budget={self.budget}; give alarms per camera-hour >= 0")
        if self.budget_confidence is not None and not 0 < self.budget_confidence < 1:
            raise WsadError(f"evaluate.budget_confidence={self.budget_confidence}; use a level in (0, 1), e.g. "
                            "0.95, or null")
        if self.video_threshold_rule not in THRESHOLD_RULES:
            raise WsadError(f"evaluate.video_threshold_rule={self.video_threshold_rule!r}; use one of "
                            f"{', '.join(THRESHOLD_RULES)}")

    @classmethod
    def from_config(cls, cfg, heldout_fitted: bool = False) -> EvaluationSettings:
        """The settings a run's config holds."""
        ev = cfg.get("evaluate") or {}
        conf = ev.get("budget_confidence")
        rule = str(ev.get("video_threshold_rule", "auto"))   # auto left unresolved: no small-collection mode
        return cls(int(cfg.trainer.bootstrap), cfg.trainer.get("bootstrap_by"),
                   str(cfg.trainer.get("interval", "jackknife")), int(cfg.seed), float(ev.get("budget", 1.0)),
                   float(ev.get("min_alarm_s", 0.0)), float(ev.get("merge_gap_s", 0.0)),
                   None if conf is None else float(conf), heldout_fitted,
                   "balanced_accuracy" if rule == "auto" else rule)

    def as_dict(self) -> dict:
        return {f.name: getattr(self, f.name) for f in fields(self)}

    def rules(self, fps: float) -> AlarmRules:
        """``min_alarm_s`` and ``merge_gap_s`` in frames at ``fps``."""
        return AlarmRules(max(1, round(self.min_alarm_s * fps)), round(self.merge_gap_s * fps))


@dataclass
class Scored:
    """One store's scored videos with what evaluating them needs besides the scores."""

    videos: list[VideoScores]
    events: dict[str, np.ndarray]
    fps: float | None


@dataclass
class Transfer:
    """The model on another store's test split, at the training site's threshold."""

    name: str
    path: str
    metrics: dict[str, float]
    scored: Scored

    def table(self) -> pd.DataFrame:
        return frame_table(self.scored.videos)


@dataclass
class Evaluation:
    """What evaluating a model's scores gives: the metrics a run logs (catalogue names, with
    intervals), the video decision, the operating point with its per-camera table, the DET
    points, the transfer results, and the warnings."""

    metrics: dict[str, float]
    settings: EvaluationSettings
    test: Scored
    heldout: list[VideoScores]
    threshold: float | None = None           # the operating point's (None: skipped)
    cameras: pd.DataFrame | None = None      # per-camera alarms at it
    transfer: list[Transfer] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)

    @cached_property
    def _timelines(self) -> list[tuple]:
        return timelines(self.test.videos, self.test.events)

    @cached_property
    def det_frames(self) -> pd.DataFrame | None:
        """Frame DET points (threshold, fpr, fnr) at every distinct test score; None without both
        classes of test frames or without an operating point."""
        tl = self._timelines
        y = np.concatenate([t[2] for t in tl]) if tl else np.zeros(0, bool)
        if self.threshold is None or not len(y) or y.all() or not y.any():
            return None
        fpr, fnr, thr = det_points(np.concatenate([t[1] for t in tl]), y)
        return pd.DataFrame({"threshold": thr, "fpr": fpr, "fnr": fnr})

    @cached_property
    def det_events(self) -> pd.DataFrame | None:
        """Event miss rate against false alarms per hour over thresholds (and the operating point)."""
        if self.det_frames is None:
            return None
        return event_tradeoff(self._timelines, self.test.fps, self.settings.rules(self.test.fps),
                              extra=[self.threshold])

    def test_table(self) -> pd.DataFrame:
        return frame_table(self.test.videos)

    def heldout_table(self) -> pd.DataFrame:
        return frame_table(self.heldout)

    def transfer_table(self) -> pd.DataFrame:
        return pd.DataFrame([{"store": t.name, "path": t.path, **t.metrics} for t in self.transfer])


def evaluate(test: Scored, heldout: list[VideoScores] | None = None,
             settings: EvaluationSettings = EvaluationSettings(),
             transfer: dict[str, tuple[str, Scored]] | None = None) -> Evaluation:
    """Every metric of ``test`` (see :mod:`wsad.evaluate.catalogue`), its intervals, the video
    decision and the operating point chosen on ``heldout`` (scores of held-out *training*
    videos, video labels only: no test label takes part in any choice), and ``transfer``
    (name -> (path, scored test split of another store)) at that operating point."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        metrics = compute_metrics(test.videos)
        if settings.bootstrap > 0 and "frame_auc" in metrics:
            by = settings.bootstrap_by or interval_unit(test.videos)
            metrics.update(grouped_bootstrap(test.videos, settings.bootstrap, seed=settings.seed, by=by,
                                             interval=settings.interval))
            few_cameras(metrics.get("interval_clusters", 0), by)
            if "macro_auc" in metrics:
                metrics["macro_auc_lo"], metrics["macro_auc_hi"] = macro_auc_interval(
                    test.videos, settings.bootstrap, settings.seed, by)
        heldout = list(heldout or [])
        metrics.update(_video_decision(test.videos, heldout, settings.video_threshold_rule))
        ev = Evaluation(metrics, settings, test, heldout)
        _operating_point(ev)
        for name, (path, scored) in (transfer or {}).items():
            ev.transfer.append(_transfer(name, path, scored, ev))
            metrics.update({f"transfer/{name}/{k}": v for k, v in ev.transfer[-1].metrics.items()})
    ev.warnings = list(dict.fromkeys(str(w.message) for w in caught))
    return ev


def interval_unit(videos: list[VideoScores]) -> str:
    """The camera: videos of one camera share its background, so the camera is the unit
    (a store without cameras gives each video its own group, which makes it the video)."""
    return "group"


def few_cameras(clusters: int, by: str) -> None:
    """Warn when the test split has too few cameras for any interval to be more than approximate,
    quoting the default interval's coverage measured in simulations of about that many cameras."""
    if by != "group" or clusters >= FEW_CAMERAS:
        return
    note = ""
    if MEASURED.is_file():
        table = json.loads(MEASURED.read_text())["coverage"]
        near = min(table, key=lambda c: abs(int(c) - clusters))
        cov = table[near]
        note = (f" (in simulated test sets of {near} cameras the 95% interval held the true AUC in "
                f"{cov['equal']:.0%} of them with equal and {cov['unequal']:.0%} with unequal videos per camera)")
    warnings.warn(f"the test split has {clusters} camera(s): intervals with the camera as the unit are "
                  f"approximate below {FEW_CAMERAS}{note}; more test cameras narrow and steady them", stacklevel=3)


def _video_decision(test: list[VideoScores], heldout: list[VideoScores], rule: str) -> dict[str, float]:
    """``video_threshold`` on the held-out videos' maximum scores, and the test accuracy at it."""
    labels = [v.label for v in heldout]
    if not heldout or len(set(labels)) < 2:
        if heldout:
            warnings.warn("video threshold skipped: the held-out videos are all of one label", stacklevel=3)
        return {}
    threshold = choose_video_threshold([float(np.max(v.segment_scores)) for v in heldout], labels, rule)
    return {"video_threshold": threshold, **video_decision(test, threshold)}


def _operating_point(ev: Evaluation) -> None:
    """``alarm/*`` at the threshold that keeps the held-out normal videos within the budget."""
    fps, s = ev.test.fps, ev.settings
    if fps is None:
        warnings.warn("alarm metrics skipped: store.json has no fps (set it with wsad-index --fps or "
                      "the store.json key \"fps\")", stacklevel=3)
        return
    normal = [] if s.heldout_fitted else [v for v in ev.heldout if v.label == 0]
    if not normal:
        warnings.warn("alarm metrics skipped: no normal training video is held out for weak validation",
                      stacklevel=3)
        return
    rules = s.rules(fps)
    frames = [v.frame_scores() for v in normal]
    ev.threshold = budget_threshold(frames, fps, s.budget, rules, s.budget_confidence)
    hours = sum(len(f) for f in frames) / fps / 3600.0
    level = s.budget_confidence or 0.95
    ucb = rate_upper_bound(count_alarms(frames, ev.threshold, rules), hours, level)
    need = hours_needed(s.budget, level)
    if s.budget_confidence is not None and hours < need:
        warnings.warn(f"evaluate.budget={s.budget:g} per camera-hour at confidence {level:g} needs at least "
                      f"{need:.2f} h of held-out normal footage, this run holds out {hours:.2f} h: the threshold "
                      "allows no alarm there; hold out more normal video (trainer.weak_val_share)", stacklevel=3)
    elif s.budget * hours < 1:  # fewer than one alarm allowed: the budget means "none at all" here
        warnings.warn(f"evaluate.budget={s.budget:g} alarms per camera-hour cannot be told from 0 on "
                      f"{hours:.2f} h of held-out normal training footage (the threshold allows no alarm "
                      f"there); hold out more normal video (trainer.weak_val_share) or raise the budget",
                      stacklevel=3)
    elif ucb > s.budget:
        warnings.warn(f"at the budget threshold the held-out normal footage's false-alarm rate has a {level:.0%} "
                      f"upper bound of {ucb:.2f} per hour, above evaluate.budget={s.budget:g}: new footage may "
                      f"exceed the budget; evaluate.budget_confidence={level:g} keeps the bound within it "
                      f"(needs at least {need:.2f} h of normal footage)", stacklevel=3)
    metrics, rows = metrics_at(ev._timelines, ev.threshold, fps, rules)
    ev.metrics.update(metrics)
    ev.metrics.update({"alarm/normal_hours": hours, "alarm/false_per_hour_ucb": ucb, "alarm/hours_needed": need})
    cams = pd.DataFrame(rows)
    cams["false_per_hour_ucb"] = [rate_upper_bound(int(r.false_alarms), r.hours, level) for r in cams.itertuples()]
    ev.cameras = cams
    ev.metrics["alarm/worst_camera_false_per_hour"] = float(cams.false_per_hour.max())


def _transfer(name: str, path: str, scored: Scored, ev: Evaluation) -> Transfer:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")   # a transfer store's missing events: its metrics say so
        metrics = compute_metrics(scored.videos)
    if ev.threshold is not None and scored.fps is not None:
        rules = ev.settings.rules(scored.fps)
        metrics.update(metrics_at(timelines(scored.videos, scored.events), ev.threshold, scored.fps, rules)[0])
    elif ev.threshold is not None:
        warnings.warn(f"transfer to {name}: alarm metrics skipped, its store.json has no fps", stacklevel=3)
    return Transfer(name, path, metrics, scored)
