"""Every metric a run logs, declared once: its name, what it measures, which way is better,
its unit, whether the console shows it and whether a report leads with it. The console line,
the report's columns, the docs' metric table and the metrics computed from test scores all
derive from this catalogue.

A metric of the test scores carries its function (``compute``: a :class:`TestSet` in, a float
or None out, None when the test split cannot give it); adding one is one :func:`add` call with
its function. The other entries are computed by their stage (intervals, the video decision,
the operating point, model selection) and are declared here for their names and meaning.
"""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from ..errors import WsadError
from .metrics import ALARM_THRESHOLD, VideoScores, average_precision, roc_auc


@dataclass(frozen=True)
class Metric:
    """One metric. ``direction``: +1 higher is better, -1 lower is better, 0 neither (a
    threshold, a count). ``reported``: aggregated over seeds by reports. ``console``: on the
    end-of-run line. ``lead``: the primary metric (reports and the console lead with it).
    ``interval``: logged with ``<name>_lo`` / ``<name>_hi``."""

    name: str
    meaning: str
    direction: int = 1
    unit: str = ""
    stage: str = "test scores"
    reported: bool = False
    console: bool = False
    lead: bool = False
    interval: bool = False
    compute: Callable[[TestSet], float | None] | None = None

    def __post_init__(self):
        if self.direction not in (-1, 0, 1):
            raise WsadError(f"metric {self.name}: direction must be -1, 0 or 1")


class TestSet:
    """The test videos' scores and truth, with the arrays metrics share computed once."""

    def __init__(self, videos: list[VideoScores]):
        self.videos = videos
        self.with_events = [v for v in videos if v.frame_labels is not None]

    @cached_property
    def frames(self) -> tuple[np.ndarray, np.ndarray]:
        """(truth, scores) of every frame with known truth, concatenated (micro)."""
        if not self.with_events:
            return np.zeros(0, bool), np.zeros(0)
        return (np.concatenate([v.frame_labels for v in self.with_events]),
                np.concatenate([v.frame_scores() for v in self.with_events]))

    @cached_property
    def anomalous(self) -> list[VideoScores]:
        """Anomalous test videos with events."""
        return [v for v in self.with_events if v.label == 1]

    @cached_property
    def normal(self) -> list[VideoScores]:
        return [v for v in self.videos if v.label == 0]


def _both(y: np.ndarray) -> bool:
    return 0 < int(np.sum(y)) < len(y)


def frame_auc(t: TestSet) -> float | None:
    y, s = t.frames
    return roc_auc(y, s, "frame_auc") if _both(y) else None


def frame_ap(t: TestSet) -> float | None:
    y, s = t.frames
    return average_precision(y, s, "frame_ap") if _both(y) else None


def anomalous_video_auc(t: TestSet) -> float | None:
    if not t.anomalous:
        return None
    y = np.concatenate([v.frame_labels for v in t.anomalous])
    s = np.concatenate([v.frame_scores() for v in t.anomalous])
    return roc_auc(y, s, "anomalous_video_auc") if _both(y) else None


def per_video_aucs(videos: list[VideoScores]) -> np.ndarray:
    """The within-video frame AUC of each anomalous video whose frames hold both classes."""
    return np.array([roc_auc(v.frame_labels, v.frame_scores()) for v in videos
                     if v.label == 1 and v.frame_labels is not None and _both(v.frame_labels)])


def macro_auc(t: TestSet) -> float | None:
    aucs = per_video_aucs(t.anomalous)
    return float(aucs.mean()) if len(aucs) else None


def false_alarm_rate(t: TestSet) -> float | None:
    if not t.normal:
        return None
    return float((np.concatenate([v.frame_scores() for v in t.normal]) >= ALARM_THRESHOLD).mean())


def video_auc(t: TestSet) -> float | None:
    labels = np.array([v.label for v in t.videos])
    if not _both(labels):
        return None
    return roc_auc(labels, [float(np.max(v.segment_scores)) for v in t.videos], "video_auc")


CATALOGUE: dict[str, Metric] = {}


def add(metric: Metric) -> Metric:
    """Declare a metric (its name must be new)."""
    if metric.name in CATALOGUE:
        raise WsadError(f"metric {metric.name} is already in the catalogue")
    CATALOGUE[metric.name] = metric
    return metric


def remove(name: str) -> None:
    """Take a metric out again (tests and worked examples clean up after themselves)."""
    CATALOGUE.pop(name, None)


for _m in (
    # test scores (DESIGN names)
    Metric("frame_auc", "ROC AUC over the concatenated frames of all test videos (micro)", 1, "",
           reported=True, console=True, lead=True, interval=True, compute=frame_auc),
    Metric("frame_ap", "average precision over the concatenated frames of all test videos", 1, "",
           reported=True, console=True, interval=True, compute=frame_ap),
    Metric("anomalous_video_auc", "frame AUC over the frames of anomalous test videos only", 1, "",
           reported=True, compute=anomalous_video_auc),
    Metric("macro_auc", "mean over anomalous test videos of each video's own frame AUC (ranking within a video; "
           "unmoved by score offsets between videos)", 1, "", reported=True, console=True, interval=True,
           compute=macro_auc),
    Metric("false_alarm_rate", f"share of normal test videos' frames scored >= {ALARM_THRESHOLD} (a fixed "
           "threshold, not the operating point)", -1, "share", reported=True, compute=false_alarm_rate),
    Metric("video_auc", "ROC AUC of each test video's maximum segment score against the video labels", 1, "",
           reported=True, console=True, compute=video_auc),
    # intervals (wsad.evaluate.bootstrap)
    Metric("frame_auc_se", "standard error of frame_auc with the interval unit as cluster", 0, "", "intervals"),
    Metric("interval_clusters", "clusters (videos or cameras) the intervals treat as independent", 0, "count",
           "intervals"),
    Metric("bootstrap_kept", "cluster resamples holding both classes (the others are dropped)", 0, "count",
           "intervals"),
    # the video decision (wsad.evaluate.decision)
    Metric("video_threshold", "threshold on the video score, chosen on held-out training videos", 0, "",
           "video decision", reported=True),
    Metric("video_accuracy", "share of test videos called right at video_threshold", 1, "share",
           "video decision", reported=True),
    Metric("video_balanced_accuracy", "mean of the true-positive and true-negative rates of test videos at "
           "video_threshold", 1, "share", "video decision", reported=True),
    # the operating point (wsad.evaluate.alarms)
    Metric("alarm/event_recall", "share of test events overlapped by an alarm at the budget threshold", 1, "share",
           "operating point", reported=True, console=True),
    Metric("alarm/false_per_hour", "alarms overlapping no event, per hour of test footage", -1, "per hour",
           "operating point", reported=True, console=True),
    Metric("alarm/delay_s", "median seconds from an event's start to its first alarm frame", -1, "s",
           "operating point", reported=True),
    Metric("alarm/frame_precision", "share of alarmed test frames inside events", 1, "share", "operating point",
           reported=True),
    Metric("alarm/frame_recall", "share of event frames alarmed", 1, "share", "operating point", reported=True),
    Metric("alarm/threshold", "the lowest score threshold keeping held-out normal training footage within "
           "evaluate.budget alarms per camera-hour", 0, "", "operating point", reported=True, console=True),
    Metric("alarm/normal_hours", "hours of held-out normal training footage the threshold is set on", 0, "h",
           "operating point"),
    Metric("alarm/false_per_hour_ucb", "one-sided upper confidence bound (exact Poisson, evaluate.budget_confidence "
           "or 95%) of the held-out normal footage's false-alarm rate at the threshold", -1, "per hour",
           "operating point", reported=True),
    Metric("alarm/hours_needed", "hours of normal footage on which zero alarms certify evaluate.budget at that "
           "confidence", 0, "h", "operating point"),
    Metric("alarm/worst_camera_false_per_hour", "the test camera with the most false alarms per hour at the "
           "threshold", -1, "per hour", "operating point", reported=True),
    # model selection (wsad.train)
    Metric("selected_epoch", "the epoch whose model is evaluated", 0, "epoch", "selection"),
    Metric("weak_val_video_auc", "video AUC on held-out training cameras (video labels only) at the selected "
           "epoch", 1, "", "selection"),
    Metric("selection/epochs", "the epoch count chosen before a refit", 0, "epoch", "selection"),
):
    add(_m)


def reported() -> tuple[str, ...]:
    """Metrics reports aggregate over seeds, in catalogue order."""
    return tuple(m.name for m in CATALOGUE.values() if m.reported)


def console() -> tuple[str, ...]:
    return tuple(m.name for m in CATALOGUE.values() if m.console)


def lead() -> str:
    return next(m.name for m in CATALOGUE.values() if m.lead)


def interval_names() -> tuple[str, ...]:
    """``<name>_lo`` / ``<name>_hi`` of every metric with an interval."""
    return tuple(f"{m.name}_{end}" for m in CATALOGUE.values() if m.interval for end in ("lo", "hi"))


def compute_metrics(videos: list[VideoScores]) -> dict[str, float]:
    """Every catalogued metric of the test scores that this test split can give. Frame-level
    ones need events for anomalous test videos; videos without them are skipped with a warning."""
    import warnings

    if not videos:
        raise WsadError("no test videos to evaluate")
    missing = [v.video for v in videos if v.frame_labels is None]
    if missing:
        warnings.warn(f"{len(missing)} anomalous test video(s) have no events "
                      f"(e.g. {missing[0]}); frame-level metrics skip them", stacklevel=2)
    test = TestSet(videos)
    out = {}
    for m in list(CATALOGUE.values()):
        if m.compute is not None:
            value = m.compute(test)
            if value is not None:
                out[m.name] = float(value)
    return out


def markdown() -> str:
    """The catalogue as a markdown table (the docs' metric table)."""
    arrow = {1: "higher", -1: "lower", 0: "n/a"}
    rows = ["| metric | what it measures | better | unit | stage |", "|---|---|---|---|---|"]
    for m in CATALOGUE.values():
        name = f"`{m.name}`" + (" (± interval)" if m.interval else "")
        rows.append(f"| {name} | {m.meaning} | {arrow[m.direction]} | {m.unit or '-'} | {m.stage} |")
    return "\n".join(rows)
