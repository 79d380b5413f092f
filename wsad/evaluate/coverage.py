"""Simulated test sets with a known frame AUC, to measure how often an interval
covers it.

Every video of camera c is scored s_t = a_c + b_v + e_t + shift * [t in event],
with a_c ~ N(0, camera_sd^2) shared by the camera's videos, b_v ~ N(0, video_sd^2),
and e_t a unit-variance AR(1) series (e_t = rho e_{t-1} + sqrt(1 - rho^2) w_t) within
the video. A video is anomalous with probability ``anomalous_share`` (the test set is
a random draw of videos) and then holds one event. Over a population of cameras the micro
frame AUC is P(s_pos > s_neg) for frames of different videos,
Phi(shift / sqrt(2 (camera_sd^2 + video_sd^2 + 1))): pairs within one camera are
a vanishing share of all pairs.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats
from scipy.signal import lfilter

from .bootstrap import clustered_interval
from .intervals import grouped_bootstrap
from .metrics import VideoScores, roc_auc


@dataclass(frozen=True)
class Design:
    """A test set: ``cameras`` x ``videos_per_camera`` videos of ``length`` frames."""

    cameras: int
    videos_per_camera: int
    length: int = 60
    anomalous_share: float = 1 / 3  # each video is anomalous with this probability
    event: tuple[int, int] = (8, 20)
    rho: float = 0.9
    camera_sd: float = 0.0
    video_sd: float = 0.5
    shift: float = 1.5

    @property
    def true_auc(self) -> float:
        return float(stats.norm.cdf(self.shift / np.sqrt(2 * (self.camera_sd ** 2 + self.video_sd ** 2 + 1))))


def simulate(design: Design, rng: np.random.Generator) -> list[VideoScores]:
    d = design
    n = d.cameras * d.videos_per_camera
    noise = rng.standard_normal((n, d.length))
    e = lfilter([np.sqrt(1 - d.rho ** 2)], [1, -d.rho], noise[:, 1:], axis=1,
                zi=(d.rho * noise[:, :1]))[0]
    e = np.concatenate([noise[:, :1], e], axis=1)             # stationary from the first frame
    offsets = (np.repeat(rng.normal(0, d.camera_sd, d.cameras), d.videos_per_camera)
               + rng.normal(0, d.video_sd, n))
    anomalous = rng.random(n) < d.anomalous_share
    anomalous[rng.integers(n)] = True                         # at least one of each kind
    anomalous[rng.choice(np.flatnonzero(anomalous))] = not anomalous.all()
    out = []
    for i in range(n):
        labels = np.zeros(d.length, np.int8)
        if anomalous[i]:
            span = int(rng.integers(d.event[0], d.event[1] + 1))
            start = int(rng.integers(0, d.length - span + 1))
            labels[start:start + span] = 1
        scores = offsets[i] + e[i] + d.shift * labels
        out.append(VideoScores(f"v{i}", f"c{i // d.videos_per_camera}", int(anomalous[i]), scores, labels,
                               d.length, 1))
    return out


def coverage(design: Design, replicates: int, by: str, interval: str, seed: int = 0,
             level: float = 0.95, n_resamples: int = 200) -> dict[str, float]:
    """Share of ``replicates`` simulated test sets whose interval holds the true AUC,
    with its binomial standard error, the mean width and the mean point estimate."""
    rng = np.random.default_rng(seed)
    hits, widths, points = [], [], []
    for r in range(replicates):
        videos = simulate(design, rng)
        if interval == "clustered":    # what grouped_bootstrap logs by default, without its resamples
            lo, hi, _, _ = clustered_interval(videos, by, level)
        else:
            res = grouped_bootstrap(videos, n_resamples, seed=r, level=level, by=by, interval=interval)
            lo, hi = res["frame_auc_lo"], res["frame_auc_hi"]
        hits.append(lo <= design.true_auc <= hi)
        widths.append(hi - lo)
        points.append(roc_auc(np.concatenate([v.frame_labels for v in videos]),
                              np.concatenate([v.segment_scores for v in videos])))
    cov = float(np.mean(hits))
    return {"coverage": cov, "coverage_se": float(np.sqrt(cov * (1 - cov) / replicates)),
            "width": float(np.mean(widths)), "mean_auc": float(np.mean(points)),
            "true_auc": design.true_auc, "replicates": replicates}


#: The two test sets of the coverage table: independent videos, and videos clustered by camera.
DESIGNS = {"(a) 150 independent videos": (Design(150, 1), "video"),
           "(b) 15 cameras x 10 videos": (Design(15, 10, camera_sd=0.7, video_sd=0.3), "group")}


def coverage_table(replicates: int = 300, seed: int = 0, intervals=("clustered", "percentile")) -> pd.DataFrame:
    rows = []
    for name, (design, by) in DESIGNS.items():
        for interval in intervals:
            for unit in dict.fromkeys([by, "video"]):
                res = coverage(design, replicates, unit, interval, seed)
                rows.append({"test set": name, "unit": unit, "interval": interval, **res})
    return pd.DataFrame(rows)
