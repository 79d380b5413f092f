"""Alarms: what a deployed threshold would raise, and how it meets the ground truth.

A frame is *above* when its score >= the threshold. An **alarm** is a maximal run of
above frames, after two optional rules, applied in this order:

1. runs separated by at most ``merge_gap`` below frames are merged into one alarm
   (default 0: no merging);
2. alarms shorter than ``min_frames`` frames are dropped (default 1: none dropped).

Alarms and events are half-open frame intervals ``[start, end)``. An alarm and an
event **overlap** when they share at least one frame: ``a.start < e.end and
e.start < a.end``. An event is *caught* when at least one alarm overlaps it; its
*delay* is the first frame of an overlapping alarm inside the event minus the
event's start. A *false alarm* overlaps no event.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import WsadError


@dataclass(frozen=True)
class AlarmRules:
    """How above-threshold frames become alarms (see the module docstring)."""

    min_frames: int = 1
    merge_gap: int = 0

    def __post_init__(self):
        if int(self.min_frames) < 1:
            raise WsadError(f"alarm min_frames={self.min_frames}; use 1 (keep every alarm) or more")
        if int(self.merge_gap) < 0:
            raise WsadError(f"alarm merge_gap={self.merge_gap}; use 0 (no merging) or more frames")


def alarm_runs(above: np.ndarray, rules: AlarmRules = AlarmRules()) -> np.ndarray:
    """``[n_alarms, 2]`` start/end (exclusive) frames of the alarms in a boolean frame mask."""
    above = np.asarray(above, dtype=bool)
    edges = np.diff(np.concatenate([[False], above, [False]]).astype(np.int8))
    return _apply_rules(np.flatnonzero(edges == 1), np.flatnonzero(edges == -1), rules)


def _apply_rules(starts: np.ndarray, ends: np.ndarray, rules: AlarmRules) -> np.ndarray:
    """Maximal above runs ``[starts, ends)`` -> alarms: merge short gaps, then drop short alarms."""
    if len(starts) and rules.merge_gap > 0:
        keep = np.concatenate([[True], starts[1:] - ends[:-1] > rules.merge_gap])
        starts = starts[keep]
        ends = ends[np.concatenate([keep[1:], [True]])]
    runs = np.stack([starts, ends], axis=1) if len(starts) else np.zeros((0, 2), dtype=np.int64)
    return runs[runs[:, 1] - runs[:, 0] >= rules.min_frames]


def _constant_runs(scores: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Run-length form of a frame score array: the value of each run of equal scores and the
    frame bounds ``[0, e_1, ..., n]`` (frame scores repeat each segment's score, so this is
    ~segment_frames times shorter)."""
    cut = np.flatnonzero(np.diff(scores) != 0) + 1
    return scores[np.concatenate([[0], cut])] if len(scores) else scores, np.concatenate([[0], cut, [len(scores)]])


def _runs_alarms(values: np.ndarray, bounds: np.ndarray, threshold: float, rules: AlarmRules) -> np.ndarray:
    """``alarm_runs(frames >= threshold, rules)`` from the run-length form (:func:`_constant_runs`)."""
    edges = np.diff(np.concatenate([[False], values >= threshold, [False]]).astype(np.int8))
    return _apply_rules(bounds[np.flatnonzero(edges == 1)], bounds[np.flatnonzero(edges == -1)], rules)


def _count_alarms(values: np.ndarray, bounds: np.ndarray, threshold: float, rules: AlarmRules) -> int:
    """``len(alarm_runs(frames >= threshold, rules))`` on the run-length form."""
    return len(_runs_alarms(values, bounds, threshold, rules))


@dataclass
class EventMatch:
    """How one video's alarms meet its events."""

    caught: np.ndarray        # [n_events] bool
    delay_frames: np.ndarray  # [n_events] frames from start to the first alarm frame inside (nan when missed)
    false_alarms: int         # alarms overlapping no event


def match_events(alarms: np.ndarray, events: np.ndarray) -> EventMatch:
    """Match ``alarms`` ``[A, 2]`` against ``events`` ``[E, 2]`` (both half-open frame intervals)."""
    alarms = np.asarray(alarms, dtype=np.int64).reshape(-1, 2)
    events = np.asarray(events, dtype=np.int64).reshape(-1, 2)
    # overlap[a, e]: alarm a shares a frame with event e
    overlap = (alarms[:, None, 0] < events[None, :, 1]) & (events[None, :, 0] < alarms[:, None, 1])
    caught = overlap.any(axis=0)
    first_inside = np.maximum(alarms[:, None, 0], events[None, :, 0]).astype(np.float64)
    first_inside[~overlap] = np.inf
    first = first_inside.min(axis=0) if len(alarms) else np.full(len(events), np.inf)
    delay = np.where(caught, first - events[:, 0], np.nan)
    return EventMatch(caught, delay, int((~overlap.any(axis=1)).sum()) if len(events) else len(alarms))


def alarms_per_hour(frame_scores: list[np.ndarray], threshold: float, fps: float,
                    rules: AlarmRules = AlarmRules()) -> float:
    """Alarms per hour of footage raised on ``frame_scores`` (one array per video) at ``threshold``."""
    frames = sum(len(s) for s in frame_scores)
    count = sum(len(alarm_runs(s >= threshold, rules)) for s in frame_scores)
    return count / (frames / fps / 3600.0)


def rate_upper_bound(count: int, hours: float, confidence: float = 0.95) -> float:
    """The exact one-sided upper confidence bound of a Poisson rate from ``count`` events in
    ``hours`` (Garwood 1936): chi2_{confidence}(2 (count + 1)) / (2 hours), per hour."""
    from scipy.special import gammaincinv

    # chi2.ppf(c, 2(n + 1)) / 2 = gammaincinv(n + 1, c): no scipy.stats import on the run's path
    return float(gammaincinv(count + 1, confidence)) / hours if hours > 0 else float("inf")


def hours_needed(budget: float, confidence: float = 0.95) -> float:
    """Hours of normal footage on which zero alarms put the rate's upper bound at ``budget``:
    -ln(1 - confidence) / budget (the least footage that can certify the budget at all)."""
    return float(-np.log(1 - confidence) / budget) if budget > 0 else float("inf")


def allowed_alarms(budget: float, hours: float, confidence: float | None = None) -> int:
    """The most alarms ``hours`` of normal footage may raise within ``budget`` per hour: counts,
    not float rates (``budget x hours`` is read with a relative tolerance, so 1 per hour on
    0.9999999999999999 h allows one alarm). With ``confidence``, the most alarms whose exact
    Poisson upper bound (:func:`rate_upper_bound`) stays within the budget (-1: not even none)."""
    if confidence is None:
        return int(np.floor(budget * hours * (1 + 1e-9) + 1e-12))
    n = -1
    while rate_upper_bound(n + 1, hours, confidence) <= budget * (1 + 1e-9):
        n += 1
    return n


def budget_threshold(normal_scores: list[np.ndarray], fps: float, budget: float,
                     rules: AlarmRules = AlarmRules(), confidence: float | None = None) -> float:
    """The lowest threshold whose alarm count on ``normal_scores`` (frame scores of videos known
    to be wholly normal, e.g. held-out normal *training* videos) is within ``budget`` alarms per
    hour (:func:`allowed_alarms`; with ``confidence``, within the budget at that confidence), at
    it and at every higher candidate (the count is not monotone in the threshold: raising it can
    split one alarm into two, so the first crossing from above is kept). Candidates are the
    distinct scores; above the highest score no alarm is raised."""
    if budget < 0:
        raise WsadError(f"evaluate.budget={budget}; give alarms per camera-hour >= 0")
    if not normal_scores or not sum(len(s) for s in normal_scores):
        raise WsadError("a budget threshold needs held-out normal training videos")
    candidates = np.unique(np.concatenate(normal_scores))[::-1]   # high to low
    runs = [_constant_runs(np.asarray(x)) for x in normal_scores]
    hours = sum(len(x) for x in normal_scores) / fps / 3600.0
    allowed = allowed_alarms(budget, hours, confidence)
    chosen = float(np.nextafter(candidates[0], np.inf))            # no alarm at all
    for t in candidates:
        if sum(_count_alarms(v, b, float(t), rules) for v, b in runs) > allowed:
            break
        chosen = float(t)
    return chosen


def count_alarms(frame_scores: list[np.ndarray], threshold: float, rules: AlarmRules = AlarmRules()) -> int:
    """Alarms raised on ``frame_scores`` (one array per video) at ``threshold``."""
    return sum(_count_alarms(*_constant_runs(np.asarray(x)), float(threshold), rules) for x in frame_scores)


def timelines(videos, events: dict[str, np.ndarray]) -> list[tuple]:
    """(camera, frame scores, frame truth, events) of the videos that take part in event metrics:
    anomalous videos without events take no part in recall or delay, and their alarms are not
    counted as false."""
    out = []
    for v in videos:
        if v.label == 1 and v.frame_labels is None:
            continue
        scores = v.frame_scores()
        truth = v.frame_labels.astype(bool) if v.frame_labels is not None else np.zeros(len(scores), bool)
        out.append((v.group, scores, truth, events.get(v.video, np.zeros((0, 2)))))
    return out


def timelines_from_table(table: pd.DataFrame, events: dict[str, np.ndarray]) -> list[tuple]:
    """The timelines of a frame table (columns video, frame, score, label, group; label -1: an
    anomalous video without events, left out like in :func:`timelines`)."""
    out = []
    for video, g in table.groupby("video", sort=False):
        g = g.sort_values("frame")
        label = g["label"].to_numpy()
        if (label < 0).any():
            continue
        out.append((g["group"].iloc[0], g["score"].to_numpy(), label.astype(bool),
                    events.get(video, np.zeros((0, 2)))))
    return out


def metrics_at(timelines: list[tuple], threshold: float, fps: float,
               rules: AlarmRules) -> tuple[dict[str, float], list[dict]]:
    """The ``alarm/*`` metrics and per-camera rows of ``timelines`` (camera, frame scores,
    frame truth, events) at ``threshold``."""
    caught, delays, false, frames, per_cam = [], [], 0, 0, {}
    tp = fp = fn = 0
    for group, scores, truth, ev in timelines:
        above = scores >= threshold
        m = match_events(alarm_runs(above, rules), ev)
        caught += m.caught.tolist()
        delays += m.delay_frames[m.caught].tolist()
        false += m.false_alarms
        frames += len(scores)
        tp, fp, fn = tp + int((above & truth).sum()), fp + int((above & ~truth).sum()), fn + int((~above & truth).sum())
        row = per_cam.setdefault(group, {"group": group, "hours": 0.0, "false_alarms": 0, "events": 0, "caught": 0})
        row["hours"] += len(scores) / fps / 3600.0
        row["false_alarms"] += m.false_alarms
        row["events"] += len(m.caught)
        row["caught"] += int(m.caught.sum())
    hours = frames / fps / 3600.0
    out = {"alarm/threshold": float(threshold),
           "alarm/event_recall": float(np.mean(caught)) if caught else float("nan"),
           "alarm/false_per_hour": false / hours if hours else float("nan"),
           "alarm/delay_s": float(np.median(delays)) / fps if delays else float("nan"),
           "alarm/frame_precision": tp / (tp + fp) if tp + fp else float("nan"),
           "alarm/frame_recall": tp / (tp + fn) if tp + fn else float("nan")}
    rows = [{**r, "false_per_hour": r["false_alarms"] / r["hours"] if r["hours"] else float("nan")}
            for r in per_cam.values()]
    return out, rows


def event_metrics(videos, events: dict[str, np.ndarray], threshold: float, fps: float,
                  rules: AlarmRules = AlarmRules()) -> tuple[dict[str, float], list[dict]]:
    """The ``alarm/*`` metrics of test ``videos`` (:class:`~wsad.evaluate.metrics.VideoScores`)
    at ``threshold``, and one row per camera (false alarms per hour, events caught).

    ``events``: ``{video: [E, 2]}`` half-open frame intervals; anomalous videos without
    events take no part in recall or delay, and their alarms are not counted as false."""
    return metrics_at(timelines(videos, events), threshold, fps, rules)


def event_tradeoff(timelines: list[tuple], fps: float, rules: AlarmRules = AlarmRules(),
                   points: int = 240, extra=()) -> pd.DataFrame:
    """Event miss rate against false alarms per hour over thresholds (``points`` quantiles of the
    distinct test scores, the ``extra`` thresholds, and one above the highest score): the
    event-level side of the DET curve, on ``timelines`` (:func:`timelines`).
    Columns: threshold, event_miss, false_per_hour."""
    distinct = np.unique(np.concatenate([t[1] for t in timelines])) if timelines else np.zeros(0)
    if not len(distinct):
        return pd.DataFrame(columns=["threshold", "event_miss", "false_per_hour"])
    # denser towards the top scores, where the few-alarm operating points are
    levels = np.concatenate([np.linspace(0, 1, points // 2), 1 - np.geomspace(1e-5, 0.5, points - points // 2)])
    picks = np.unique(np.quantile(distinct, levels, method="nearest"))
    values, bounds, events = _joined_runs(timelines, rules)
    hours = sum(len(t[1]) for t in timelines) / fps / 3600.0
    rows = []
    for t in np.unique([*picks, *extra, np.nextafter(distinct[-1], np.inf)]):
        m = match_events(_runs_alarms(values, bounds, float(t), rules), events)
        caught = int(m.caught.sum())
        rows.append({"threshold": float(t), "event_miss": 1.0 - caught / len(events) if len(events) else float("nan"),
                     "false_per_hour": m.false_alarms / hours if hours else float("nan")})
    return pd.DataFrame(rows)


def _joined_runs(timelines: list[tuple], rules: AlarmRules) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The run-length forms (:func:`_constant_runs`) of all ``timelines`` end to end, each
    followed by a never-alarming stretch longer than ``rules.merge_gap`` (no alarm spans two
    videos or merges across them), and their events shifted alike: the alarms and matches of
    every video in one pass per threshold, as :func:`metrics_at` finds them video by video."""
    values, bounds, events, start = [], [[0]], [], 0
    for _, scores, _, ev in timelines:
        v, b = _constant_runs(np.asarray(scores, dtype=np.float64))
        values += [v, [-np.inf]]
        bounds += [start + b[1:], [start + b[-1] + rules.merge_gap + 1]]
        events.append(np.asarray(ev, dtype=np.int64).reshape(-1, 2) + start)
        start += b[-1] + rules.merge_gap + 1
    return (np.concatenate(values), np.concatenate(bounds).astype(np.int64),
            np.concatenate(events) if events else np.zeros((0, 2), np.int64))
