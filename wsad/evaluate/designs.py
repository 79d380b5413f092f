"""Simulated test sets unlike the project's scenarios, to measure how often an interval holds
the true frame AUC where users' data sits: few cameras, unequal numbers of videos per camera,
camera-specific offsets, effect sizes and anomaly rates, heavy-tailed correlated noise, and
events that start and end inside segments.

A camera c has an offset a_c ~ N(0, camera_sd^2), an effect size shift * exp(N(0, effect_sd^2))
and an anomaly rate drawn from Beta around ``anomalous_share``; its video v has an offset
b_v ~ N(0, video_sd^2). Segment t of a video scores a_c + b_v + e_t + shift_c * f_t, where e_t is
AR(1) with Student-t(``tail_df``) innovations scaled to unit variance, and f_t is the share of the
segment's 16 frames inside the video's event (events are placed at frame level). The true AUC is
the population's micro frame AUC, estimated once per design from a very large test set of the
same design (``population_auc``)."""
from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
from scipy.signal import lfilter

from .metrics import VideoScores, roc_auc

SEGMENT_FRAMES = 16


@dataclass(frozen=True)
class Family:
    """One design of the family."""

    cameras: int
    videos: int = 6                 # mean videos per camera
    unequal: bool = False           # videos per camera drawn from a geometric law (1 .. many)
    segments: int = 40              # mean segments per video
    anomalous_share: float = 0.4
    rate_spread: float = 0.2        # sd of the cameras' anomaly rates around anomalous_share
    camera_sd: float = 0.6
    video_sd: float = 0.4
    shift: float = 1.2
    effect_sd: float = 0.4
    rho: float = 0.85
    tail_df: float = 3.0            # Student-t innovations (heavy tails); inf: Gaussian
    event: tuple[int, int] = (40, 200)   # event length in frames

    @property
    def name(self) -> str:
        return f"{self.cameras} cameras, {'unequal' if self.unequal else 'equal'} videos"


def _noise(rng: np.random.Generator, n: int, rho: float, df: float) -> np.ndarray:
    w = rng.standard_t(df, n) * np.sqrt((df - 2) / df) if np.isfinite(df) else rng.standard_normal(n)
    e = lfilter([np.sqrt(1 - rho ** 2)], [1, -rho], w)
    return e


def simulate_family(d: Family, rng: np.random.Generator) -> list[VideoScores]:
    """One test set of design ``d`` (at least one anomalous and one normal video)."""
    out = []
    counts = (rng.geometric(1 / d.videos, d.cameras) if d.unequal
              else np.full(d.cameras, d.videos))
    a = rng.normal(0, d.camera_sd, d.cameras)
    shifts = d.shift * np.exp(rng.normal(0, d.effect_sd, d.cameras))
    k = max(1e-3, d.anomalous_share * (1 - d.anomalous_share) / max(d.rate_spread ** 2, 1e-6) - 1)
    rates = rng.beta(d.anomalous_share * k, (1 - d.anomalous_share) * k, d.cameras)
    for c in range(d.cameras):
        for v in range(int(counts[c])):
            segs = max(4, int(rng.poisson(d.segments)))
            frames = segs * SEGMENT_FRAMES + int(rng.integers(0, SEGMENT_FRAMES))
            labels = np.zeros(frames, np.int8)
            anomalous = rng.random() < rates[c]
            if anomalous:
                span = int(min(frames - 1, rng.integers(d.event[0], d.event[1] + 1)))
                start = int(rng.integers(0, frames - span + 1))
                labels[start:start + span] = 1
            idx = np.minimum(np.arange(frames) // SEGMENT_FRAMES, segs - 1)
            share = np.bincount(idx, weights=labels, minlength=segs) / np.bincount(idx, minlength=segs)
            scores = a[c] + rng.normal(0, d.video_sd) + _noise(rng, segs, d.rho, d.tail_df) + shifts[c] * share
            out.append(VideoScores(f"c{c}v{v}", f"c{c}", int(anomalous), scores, labels, frames, SEGMENT_FRAMES))
    kinds = {v.label for v in out}
    if kinds != {0, 1}:   # a test set needs both kinds: draw again
        return simulate_family(d, rng)
    return out


def population_auc(d: Family, cameras: int = 3000, seed: int = 12345) -> float:
    """The micro frame AUC of a very large test set of design ``d`` (the estimand)."""
    big = simulate_family(replace(d, cameras=cameras), np.random.default_rng(seed))
    y = np.concatenate([v.frame_labels for v in big])
    s = np.concatenate([v.frame_scores() for v in big])
    return roc_auc(y, s)


#: The family the coverage table and its test measure.
FAMILY = [Family(c, unequal=u) for c in (6, 8, 16, 40) for u in (False, True)]


CANDIDATES = ("jackknife", "clustered", "logit", "percentile", "bc", "bca")


def candidate_intervals(videos: list[VideoScores], by: str, n_resamples: int, seed: int,
                        level: float = 0.95) -> dict[str, tuple[float, float]]:
    """Every candidate 95% frame-AUC interval of one test set, the resamples drawn once."""
    from .bootstrap import clustered_auc, clustered_interval, grouped_bootstrap_values
    from .intervals import bca_bounds, jackknife_interval, jackknife_values, logit_interval

    point = clustered_auc(videos, by)[0]
    boot = grouped_bootstrap_values(videos, n_resamples, seed, by=by)[0]
    kept = boot[~np.isnan(boot)]
    q = [(1 - level) / 2 * 100, (1 + level) / 2 * 100]
    return {"jackknife": jackknife_interval(videos, by, level)[:2],
            "clustered": clustered_interval(videos, by, level)[:2], "logit": logit_interval(videos, by, level)[:2],
            "percentile": tuple(np.percentile(kept, q)), "bc": bca_bounds(point, boot, None, level),
            "bca": bca_bounds(point, boot, jackknife_values(videos, by), level)}


def family_coverage(d: Family, replicates: int, seed: int = 0, n_resamples: int = 400,
                    truth: float | None = None) -> list[dict]:
    """Per candidate: the share of ``replicates`` test sets whose interval (camera as the unit)
    holds the population AUC, its binomial se, the mean width, and the share of misses below."""
    truth = population_auc(d) if truth is None else truth
    rng = np.random.default_rng(seed)
    hits = {c: [] for c in CANDIDATES}
    widths = {c: [] for c in CANDIDATES}
    low = {c: [] for c in CANDIDATES}
    for r in range(replicates):
        got = candidate_intervals(simulate_family(d, rng), "group", n_resamples, seed + r)
        for c, (lo, hi) in got.items():
            hits[c].append(lo <= truth <= hi)
            widths[c].append(hi - lo)
            low[c].append(hi < truth)
    rows = []
    for c in CANDIDATES:
        cov = float(np.mean(hits[c]))
        misses = max(1, replicates - int(np.sum(hits[c])))
        rows.append({"design": d.name, "interval": c, "coverage": cov,
                     "coverage_se": float(np.sqrt(cov * (1 - cov) / replicates)), "width": float(np.mean(widths[c])),
                     "misses_below": float(np.sum(low[c]) / misses), "true_auc": truth, "replicates": replicates})
    return rows


def normal_streams(rng: np.random.Generator, cameras: int, hours: float, offsets: np.ndarray,
                   fps: float = 25.0, video_s: float = 120.0, rho: float = 0.9, df: float = 3.0) -> list[np.ndarray]:
    """Segment scores of normal footage: ``hours`` over ``cameras`` (videos of ``video_s``
    seconds), each camera's scores its offset plus heavy-tailed AR(1) noise over 16-frame
    segments. A segment's frames share its score, so with the default alarm rules the alarms
    counted on segments at ``fps / 16`` are those counted on frames at ``fps``."""
    per_video = int(video_s * fps) // SEGMENT_FRAMES
    videos = max(cameras, int(round(hours * 3600 / video_s)))
    return [offsets[v % cameras] + _noise(rng, per_video, rho, df) for v in range(videos)]


def budget_exceedance(hours: float, budget: float = 1.0, confidence: float | None = None, cameras: int = 8,
                      replicates: int = 400, new_hours: float = 40.0, new_cameras: bool = False,
                      seed: int = 0, fps: float = 25.0) -> dict:
    """How often a threshold chosen on ``hours`` of held-out normal footage for ``budget`` alarms
    per hour (``confidence``: on the rate's upper bound) raises more than the budget on
    ``new_hours`` of new footage of the same cameras (or of new cameras)."""
    from .alarms import budget_threshold, count_alarms

    rng = np.random.default_rng(seed)
    over, rates = [], []
    seg_fps = fps / SEGMENT_FRAMES
    for _ in range(replicates):
        offsets = rng.normal(0, 0.5, cameras)
        held = normal_streams(rng, cameras, hours, offsets, fps)
        t = budget_threshold(held, seg_fps, budget, confidence=confidence)
        later = offsets if not new_cameras else rng.normal(0, 0.5, cameras)
        new = normal_streams(rng, cameras, new_hours, later, fps)
        rate = count_alarms(new, t) / (sum(len(x) for x in new) / seg_fps / 3600)
        rates.append(rate)
        over.append(rate > budget)
    share = float(np.mean(over))
    return {"hours": hours, "budget": budget, "confidence": confidence, "new_cameras": new_cameras,
            "exceed": share, "exceed_se": float(np.sqrt(share * (1 - share) / replicates)),
            "median_rate": float(np.median(rates)), "replicates": replicates}
