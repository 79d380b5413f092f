"""Scores from any method, evaluated exactly as a run is: ``wsad.evaluate_scores``.

A table of scores (columns ``video, segment, score`` or ``video, frame, score``) for a store's
test videos, and optionally for held-out normal (and anomalous) *training* videos, becomes the
same :class:`~wsad.evaluate.evaluation.Evaluation` a run computes: the same metrics,
intervals, video threshold and operating point. A published model's exported scores can then
be compared with wsad's runs under one set of definitions.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import WsadError
from ..store import FeatureStore
from .evaluation import Evaluation, EvaluationSettings, Scored, evaluate
from .metrics import VideoScores


def store_events(store: FeatureStore) -> dict[str, np.ndarray]:
    """``{video: [E, 2]}`` half-open frame intervals of the store's events."""
    return {v: g[["start", "end"]].to_numpy() for v, g in store.events.groupby("video")}


def scored(store: FeatureStore, scores: dict[str, np.ndarray], segment_frames: int | None = None) -> Scored:
    """Segment scores per video (or frame scores, with ``segment_frames=1``) joined with the
    store's labels, cameras, ground truth and fps."""
    f = store.segment_frames if segment_frames is None else segment_frames
    videos = [VideoScores(v, store.group(v), store.label(v), s, store.frame_labels(v), store.frames(v), f)
              for v, s in scores.items()]
    return Scored(videos, store_events(store), store.fps)


def read_scores(path: str | Path) -> pd.DataFrame:
    """A parquet or CSV table of scores."""
    path = Path(path)
    if not path.is_file():
        raise WsadError(f"scores file {path} does not exist")
    if path.suffix == ".parquet":
        return pd.read_parquet(path)
    if path.suffix == ".csv":
        return pd.read_csv(path)
    raise WsadError(f"scores file {path}: use a .parquet or .csv table")


def score_arrays(store: FeatureStore, table: pd.DataFrame, what: str, split: str | None) -> tuple[dict, int]:
    """``{video: scores}`` in time order from a table, checked against the store, and the frames
    each score covers (the store's segment length, or 1 for frame scores)."""
    if not isinstance(table, pd.DataFrame):
        raise WsadError(f"{what}: give a DataFrame with columns video, segment (or frame), score")
    unit = "segment" if "segment" in table.columns else "frame" if "frame" in table.columns else None
    if unit is None or not {"video", "score"} <= set(table.columns):
        raise WsadError(f"{what} needs columns video, segment, score (segment scores) or video, frame, score "
                        f"(frame scores); it has {', '.join(map(str, table.columns))}")
    if table["score"].isna().any() or not np.isfinite(table["score"].to_numpy(np.float64)).all():
        bad = table.loc[~np.isfinite(table["score"].to_numpy(np.float64)), "video"].iloc[0]
        raise WsadError(f"{what}: video {bad} has a missing or infinite score; score every {unit}")
    known = set(store.videos(split))
    out = {}
    for video, g in table.groupby("video", sort=False):
        video = str(video)
        if video not in known:
            where = f"the store's {split} split" if split else "the store"
            raise WsadError(f"{what}: video {video} is not in {where} ({store.root})")
        g = g.sort_values(unit)
        n = store.n_segments(video) if unit == "segment" else store.frames(video)
        if not np.array_equal(g[unit].to_numpy(), np.arange(n)):
            raise WsadError(f"{what}: video {video} needs one score per {unit} 0..{n - 1}; it has "
                            f"{len(g)} rows covering {g[unit].min()}..{g[unit].max()}")
        out[video] = g["score"].to_numpy()
    return out, (store.segment_frames if unit == "segment" else 1)


def evaluate_scores(store: str | Path | FeatureStore, scores: pd.DataFrame | str | Path,
                    heldout: pd.DataFrame | str | Path | None = None, **settings) -> Evaluation:
    """Evaluate scores made by any method exactly as a run is evaluated.

    Args:
        store: the feature store (its folder or a :class:`~wsad.store.FeatureStore`): labels,
            events, cameras and fps of the videos.
        scores: test-split scores, a DataFrame or a parquet/CSV file with columns
            ``video, segment, score`` (segment ``t`` covers frames ``[16t, 16t + 16)``) or
            ``video, frame, score``. Every test video should be scored; the ones missing are
            named in a warning and left out.
        heldout: scores of held-out *training* videos in the same form: their normal videos set
            the alarm threshold (``budget`` alarms per camera-hour) and, with anomalous ones too,
            the video threshold. Without them both are skipped.
        **settings: :class:`~wsad.evaluate.evaluation.EvaluationSettings` fields: ``bootstrap``,
            ``bootstrap_by``, ``interval``, ``seed``, ``budget``, ``min_alarm_s``, ``merge_gap_s``.

    Returns:
        An :class:`~wsad.evaluate.evaluation.Evaluation`; ``.metrics`` holds the names a run logs.
    """
    import warnings

    store = store if isinstance(store, FeatureStore) else FeatureStore(store)
    known = {f for f in EvaluationSettings.__dataclass_fields__ if f != "heldout_fitted"}
    unknown = set(settings) - known
    if unknown:
        raise WsadError(f"unknown setting(s) {', '.join(sorted(unknown))}; known: {', '.join(sorted(known))}")
    table = read_scores(scores) if isinstance(scores, (str, Path)) else scores
    test, frames_per = score_arrays(store, table, "scores", "test")
    missing = [v for v in store.videos("test") if v not in test]
    held = None
    if heldout is not None:
        held_table = read_scores(heldout) if isinstance(heldout, (str, Path)) else heldout
        held_scores, held_per = score_arrays(store, held_table, "heldout", "train")
        held = scored(store, held_scores, held_per).videos
    ev = evaluate(scored(store, test, frames_per), held, EvaluationSettings(**settings))
    if missing:
        ev.warnings.insert(0, f"{len(missing)} test video(s) have no scores (e.g. {missing[0]}); they are left "
                              "out, so the metrics are not comparable with runs that score the whole test split")
    for message in ev.warnings:
        warnings.warn(message, UserWarning, stacklevel=2)
    return ev
