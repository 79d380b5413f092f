"""What an ablation costs at the field's size: a study of 3 variants x 3 seeds on two workers.

The store has the shape of the public benchmark collections: 1,620 train / 300 test videos of
varied lengths (log-normal, mean ~250 segments), 1024-d float16 features, 10 views per segment
(``full``; ``quick`` keeps the views and the lengths with a fifth of the cameras; ``tiny``
only checks that the script runs). It is written once under the benchmark work folder.

- ``research.epoch_s`` / ``research.ratio_to_floor``: one warm topk epoch on the 10-view store
  (views averaged, as ``data.crops=mean`` does) against the head's matrix-product floor
  (``train_floor.floor_seconds``). Goal <= 1.2 at research scale.
- ``research.peak_anon_rss_gb``: peak anonymous RSS of that run (the store memory-mapped;
  file pages are not counted). Goal <= 2 GB.
- ``research.study``: a Study of recipe=topk,windows and topk + the cluster term, seeds 0-2,
  ``EPOCHS`` epochs each, on 2 warm workers: wall time, epoch compute, efficiency
  (compute / 2 / wall) and the overhead per run. Goal: efficiency >= 0.9.
- ``research.eval_s_per_million_frames``: the end of one run, scoring the test and held-out
  videos and evaluating (every metric, the 1,000-resample intervals, the operating point), per
  million test frames, from the run's own timeline (:mod:`wsad.timeline`).

    python benchmarks/research.py [tiny|quick|full]
"""
from __future__ import annotations

import tempfile
import time
from pathlib import Path

import pandas as pd
from _common import PeakAnon, emit, size_arg, store

VIEWS = {"tiny": ["crops=2"], "quick": ["crops=10"], "full": ["crops=10"]}
EPOCHS = {"tiny": 2, "quick": 5, "full": 5}
VARIANTS = [{"recipe": "topk"}, {"recipe": "windows"}, {"recipe": "topk", "objective.cluster_distance": 1e-3}]


def epoch_against_floor(root: Path) -> dict:
    """A 3-epoch topk run in this process: its warm epoch, the floor, its peak memory and the
    evaluation's cost per million test frames."""
    from train_floor import floor_seconds, linear_chain

    from wsad import timeline
    from wsad.checkpoint import build_head
    from wsad.config import compose_config
    from wsad.store import FeatureStore
    from wsad.train import train

    with tempfile.TemporaryDirectory() as out:
        cfg = compose_config([f"data.root={root}", "recipe=topk", "trainer.epochs=3", "trainer.eval_every=1000",
                              "trainer.select=last", "tracking.enabled=false", "trainer.progress=false",
                              "trainer.plots=false", f"trainer.out_dir={out}"])
        with PeakAnon() as peak:
            t = time.perf_counter()
            res = train(cfg)
            run_s = time.perf_counter() - t
        marks = dict(timeline._MARKS)   # the run's own clock: scoring + evaluation after the epochs
        hist = pd.read_csv(f"{out}/scores/history.csv")
        frames = len(res.scores)
    warm = hist.iloc[1:].sort_values("time/train_s").iloc[0]
    dim = FeatureStore(root).dim
    floor = floor_seconds(linear_chain(build_head(cfg, dim), dim), int(warm["train_segments"]),
                          int(warm["train_batches"]), dim)
    return {"epoch_s": float(warm["time/train_s"]), "floor_s": floor,
            "ratio_to_floor": float(warm["time/train_s"]) / floor, "cold_epoch_s": float(hist.iloc[0]["time/train_s"]),
            "peak_anon_rss_gb": peak.peak, "run_s": run_s, "test_frames": frames,
            "eval_s_per_million_frames": (marks["evaluate"] - marks["epochs"]) / frames * 1e6}


def run(size: str) -> dict:
    from study import compute_s

    from wsad import Study

    root = store("full" if size == "full" else ("quick" if size == "quick" else "tiny"), VIEWS[size],
                 tag="research10")
    one = epoch_against_floor(root)
    work = Path(tempfile.mkdtemp(prefix="wsad-bench-research-"))
    base = {"trainer.epochs": EPOCHS[size], "tracking.uri": f"sqlite:///{work}/mlruns.db", "trainer.plots": False}
    Study(root, base={**base, "trainer.epochs": 1}, variants={"recipe": ["topk"]}, seeds=[10, 11],
          folder=work / "warm").run(jobs=2)   # starts the two workers (their imports are not the study's)
    study = Study(root, base=base, variants=VARIANTS, seeds=3, folder=work / "study")
    study.specs
    t = time.perf_counter()
    status = study.run(jobs=2)
    wall = time.perf_counter() - t
    compute = compute_s(study)
    return {"research": {**one, "views": int(VIEWS[size][0].split("=")[1]), "store_gb": _gb(root),
                         "study": {"runs": int((status.status == "done").sum()), "epochs": EPOCHS[size],
                                   "wall_s": wall, "compute_s": compute, "efficiency": compute / 2 / wall,
                                   "overhead_s_per_run": (wall * 2 - compute) / len(status)}}}


def _gb(root: Path) -> float:
    from _common import disk_gb

    return disk_gb(root)


if __name__ == "__main__":
    emit(run(size_arg()))
