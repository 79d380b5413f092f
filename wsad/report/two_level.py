"""Uncertainty from seeds and from the test set together: a two-level bootstrap over test
cameras and seeds, paired across variants (the same camera resample and the same seed resample
for every variant).

The seed-only interval of a report answers "is this variant better on *this* test set, whatever
the seed?"; the two-level interval answers "is it better on *cameras like these*?", since the
test cameras are a sample too. Each resample b draws the test cameras with replacement (frame
AUC recomputed on them, for every run, from the same draw) and then the seeds with replacement;
the variant's value is the mean over the drawn seeds, the difference the mean of the paired
differences. The interval is the percentile interval of those resamples (Field & Welsh 2007 for
the cluster bootstrap; two-stage resampling as in Davison & Hinkley 1997, ch. 3.8, from memory).
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ..evaluate.bootstrap import grouped_bootstrap_values
from ..evaluate.metrics import VideoScores


def _videos(folder: str | Path) -> list[VideoScores]:
    """A run's test frame scores as videos (frame-level: one score per frame)."""
    table = pd.read_parquet(Path(folder) / "scores" / "test_scores.parquet")
    out = []
    for video, g in table.groupby("video", sort=True):
        g = g.sort_values("frame")
        labels = g.label.to_numpy()
        out.append(VideoScores(str(video), str(g.group.iloc[0]), int((labels > 0).any()), g.score.to_numpy(),
                               None if (labels < 0).any() else labels.astype(np.int8), len(g), 1))
    return out


def camera_resamples(folders: dict[str, dict[str, str]], n: int, seed: int) -> dict[str, dict[str, np.ndarray]]:
    """Frame AUC of every run on ``n`` camera resamples, the same draws for every run
    (``folders``: variant -> seed -> run folder; the runs share their test split)."""
    return {v: {s: grouped_bootstrap_values(_videos(f), n, seed, by="group")[0] for s, f in runs.items()}
            for v, runs in folders.items()}


def add_two_level(rep, n: int = 500) -> bool:
    """The primary metric's rows of report ``rep`` (its runs with a ``folder`` column holding
    ``scores/test_scores.parquet``) get the two-level intervals. Runs scored on different test
    videos cannot share camera resamples: then nothing is added and False is returned."""
    tests = {tuple(sorted(pd.read_parquet(Path(f) / "scores" / "test_scores.parquet", columns=["video"])
                          .video.astype(str).unique())) for f in rep.runs.folder}
    if len(tests) != 1:
        return False
    folders = {v: dict(zip(sub.seed, sub.folder)) for v, sub in rep.runs.groupby("variant", sort=False)}
    tl = two_level_table(folders, rep.baseline, n=n).set_index("variant")
    rows = rep.table.metric == rep.primary
    for col in tl.columns:
        rep.table.loc[rows, col] = rep.table.loc[rows, "variant"].map(tl[col])
    return True


def two_level_table(folders: dict[str, dict[str, str]], baseline: str, n: int = 1000, seed: int = 0,
                    level: float = 0.95) -> pd.DataFrame:
    """Per variant: the two-level interval of its mean frame AUC and of its paired difference
    with ``baseline`` (seeds in common only)."""
    aucs = camera_resamples(folders, n, seed)
    rng = np.random.default_rng(seed + 1)
    q = [(1 - level) / 2, (1 + level) / 2]
    rows = []
    for v, runs in aucs.items():
        seeds = sorted(runs)
        common = [s for s in seeds if s in aucs[baseline]]
        mine = np.stack([runs[s] for s in seeds])                       # [seeds, n]
        draw = rng.integers(0, len(seeds), size=(n, len(seeds)))
        means = np.nanmean(mine[draw, np.arange(n)[:, None]], axis=1)
        row = {"variant": v, "two_level_lo": float(np.nanquantile(means, q[0])),
               "two_level_hi": float(np.nanquantile(means, q[1]))}
        if v != baseline and len(common) >= 2:
            d = np.stack([runs[s] - aucs[baseline][s] for s in common])
            pick = rng.integers(0, len(common), size=(n, len(common)))
            diffs = np.nanmean(d[pick, np.arange(n)[:, None]], axis=1)
            row.update(diff_two_level_lo=float(np.nanquantile(diffs, q[0])),
                       diff_two_level_hi=float(np.nanquantile(diffs, q[1])))
        rows.append(row)
    return pd.DataFrame(rows)
