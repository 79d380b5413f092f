"""Epoch time against the number of training videos.

Three stores that differ only in how many cameras and videos they hold
(100 / 400 / 1,600 training videos for ``full``; a quarter of that for
``quick``); one epoch of the top-k recipe on each (the fastest epoch after
the first), fitted as time ~ videos^e by least squares on the logs. e = 1
is linear; e > 1 means something grows faster than the data (padding to the
longest bag, a cache that stops fitting, per-batch work over all videos).

    python benchmarks/scaling.py [tiny|quick|full]
"""
from __future__ import annotations

import tempfile

import numpy as np
import pandas as pd
from _common import emit, size_arg, store

# (cameras per scene context, training videos per camera) -> 3 * c * v training videos
LADDER = {"tiny": [(1, 4), (2, 4), (4, 4)],
          "quick": [(1, 17), (3, 22), (10, 27)],
          "full": [(2, 17), (5, 27), (20, 27)]}


def epoch_seconds(root) -> float:
    from wsad.config import compose_config
    from wsad.train import train

    with tempfile.TemporaryDirectory() as out:
        cfg = compose_config([f"data.root={root}", "recipe=topk", "trainer.epochs=3",
                              "trainer.eval_every=1000", "trainer.bootstrap=0", "trainer.select=last",
                              "tracking.enabled=false", "trainer.progress=false", f"trainer.out_dir={out}"])
        train(cfg)
        hist = pd.read_csv(f"{out}/scores/history.csv")
    return float(hist["time/train_s"].iloc[1:].min())


def run(size: str) -> dict:
    from wsad.store import FeatureStore

    videos, seconds = [], []
    for c, v in LADDER[size]:
        extra = [f"cameras.{k}.train={c}" for k in ("conveyor", "loading_bay", "walkway")]
        extra += [f"cameras.{k}.test=1" for k in ("conveyor", "loading_bay", "walkway")]
        extra += [f"videos_per_camera.train={v}", "videos_per_camera.test=4"]
        root = store(size, extra, tag=f"scale{3 * c * v}")
        videos.append(len(FeatureStore(root).videos("train")))
        seconds.append(epoch_seconds(root))
    e, _ = np.polyfit(np.log(videos), np.log(seconds), 1)
    return {"scaling": {"exponent": float(e), "videos": videos, "epoch_s": seconds}}


if __name__ == "__main__":
    emit(run(size_arg()))
